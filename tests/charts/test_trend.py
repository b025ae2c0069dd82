"""Trend chart geometry: linear y scale, time-proportional dates, gaps, markers, limit.

Expected positions follow from the module's stated formulas (linear axes; dates
spaced by elapsed days) — common charting practice, no external source.
"""

from __future__ import annotations

import datetime as dt

import pytest

from shopapp.charts import Circle, Line, Polyline, Rect
from shopapp.charts.svg import to_svg
from shopapp.charts.trend import TrendSeries, trend_figure, y_range
from shopapp.core.display import percent


def _points(fig, kind):  # type: ignore[no-untyped-def]
    return [i for i in fig.items if isinstance(i, kind) and getattr(i, "title", None)]


def test_values_sit_on_a_linear_y_scale() -> None:
    fig = trend_figure(["2026-01", "2026-02", "2026-03"],
                       [TrendSeries("rework rate", [0.0, 0.5, 1.0])], y_min=0, y_max=1,
                       y_format=percent)
    pts = _points(fig, Circle)
    assert len(pts) == 3
    ys = [p.cy for p in pts]
    assert ys[1] - ys[0] == pytest.approx(ys[2] - ys[1])  # equal steps for equal values
    xs = [p.cx for p in pts]
    assert xs[1] - xs[0] == pytest.approx(xs[2] - xs[1])  # labels equally spaced
    # the 0 % and 100 % grid lines pass through the lowest and highest points
    grid_ys = {round(i.y1, 6) for i in fig.items if isinstance(i, Line) and i.y1 == i.y2}
    assert round(ys[0], 6) in grid_ys and round(ys[2], 6) in grid_ys


def test_dates_are_spaced_by_time() -> None:
    d0 = dt.date(2025, 1, 1)
    dates = [d0, d0 + dt.timedelta(days=10), d0 + dt.timedelta(days=30)]
    fig = trend_figure(dates, [TrendSeries("initial unbalance", [10.0, 15.0, 25.0])])
    xs = [p.cx for p in _points(fig, Circle)]
    assert (xs[2] - xs[1]) / (xs[1] - xs[0]) == pytest.approx(2.0)  # 20 days vs 10 days


def test_missing_values_break_the_line_and_series_differ_by_marker_shape() -> None:
    fig = trend_figure(
        ["a", "b", "c", "d", "e"],
        [TrendSeries("first pass", [0.9, 0.8, None, 0.7, 0.75]),
         TrendSeries("rework", [0.1, 0.2, 0.1, 0.1, 0.0]),
         TrendSeries("third", [0.5, 0.5, 0.5, 0.5, 0.5])],
        y_min=0, y_max=1,
    )
    lines = [i for i in fig.items if isinstance(i, Polyline) and not i.closed]
    first = [pl for pl in lines if pl.style == "series"]
    assert [len(pl.points) for pl in first] == [2, 2]  # broken at the gap
    assert len(_points(fig, Circle)) == 4  # first series: circles, none at the gap
    assert len(_points(fig, Rect)) == 5  # second series: squares
    triangles = [i for i in fig.items if isinstance(i, Polyline) and i.closed]
    assert len(triangles) >= 5  # third series: triangles (plus its legend sample)
    assert {pl.style for pl in lines} >= {"series", "series2", "series3"}


def test_limit_line_is_drawn_and_included_in_the_range() -> None:
    fig = trend_figure(["v1", "v2"], [TrendSeries("residual", [2.0, 3.0])], limit=10.0,
                       limit_label="U_per")
    limit = [i for i in fig.items if isinstance(i, Line) and i.style == "limit"]
    assert limit, "limit line missing"
    top_point = max(p.cy for p in _points(fig, Circle))
    assert limit[0].y1 > top_point  # 10 is above 3
    assert y_range([2.0, 3.0, 10.0]) == (0.0, 10.0, 2.0)


def test_links_and_bad_input() -> None:
    fig = trend_figure(["2026-01"], [TrendSeries("rework", [0.2], links=["/jobs?reworked=1"])])
    assert '<a href="/jobs?reworked=1">' in to_svg(fig)
    with pytest.raises(ValueError, match="2 values for 1"):
        trend_figure(["x"], [TrendSeries("s", [1.0, 2.0])])
