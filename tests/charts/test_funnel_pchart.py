"""Funnel plot and p-chart geometry: linear axes, the marks the modules promise.

Expected positions follow from the modules' stated formulas (linear axes; a unit at
``x ∝ n``, ``y ∝ rate``; months in equal slots) — common charting practice, no
external source. The statistics behind the limits are tested in tests/measures.
"""

from __future__ import annotations

import itertools

import pytest

from shopapp.charts import Circle, Polyline, Rect, Text
from shopapp.charts.funnel import FunnelBand, FunnelPoint, funnel_figure
from shopapp.charts.pchart import PChartMonth, PChartRun, pchart_figure
from shopapp.charts.svg import to_svg


def _bands(ns: list[int]) -> list[FunnelBand]:
    return [FunnelBand(n, 0.0, min(1.0, 0.1 + 1.0 / n), 0.0, min(1.0, 0.15 + 1.5 / n))
            for n in ns]


def test_funnel_points_sit_on_linear_axes_and_flags_are_named() -> None:
    points = [FunnelPoint("ok", 10, 0.1, link="/jobs?a=1"),
              FunnelPoint("high", 40, 0.4, flagged=True, link="/jobs?b=2"),
              FunnelPoint("tiny", 2, 0.5, judged=False)]
    fig = funnel_figure(points, 0.1, _bands(list(range(1, 41))), title="Rework by operator")
    marks = {c.title.split(":")[0]: c for c in fig.items if isinstance(c, Circle) and c.title}
    ok, high, tiny = marks["ok"], marks["high"], marks["tiny"]
    assert (high.cx - ok.cx) / (ok.cx - tiny.cx) == pytest.approx((40 - 10) / (10 - 2))
    assert (high.cy - ok.cy) / (ok.cy - tiny.cy) == pytest.approx((0.4 - 0.1) / (0.1 - 0.5))
    assert (high.style, ok.style, tiny.style) == ("flagged", "point", "unjudged")
    assert high.link == "/jobs?b=2"
    names = [t.text for t in fig.items if isinstance(t, Text)]
    assert "high" in names and "ok" not in names and "tiny" not in names
    # the outer limit line passes through its vertex at n = 40: the flagged point is above it
    outer = [p for p in fig.items if isinstance(p, Polyline) and p.style == "limit"]
    upper = max(outer, key=lambda p: max(y for _x, y in p.points))
    vertex = next(y for x, y in upper.points if x == pytest.approx(high.cx))
    assert high.cy > vertex
    assert "Rework by operator" in to_svg(fig)


def test_funnel_refuses_a_rate_outside_0_1() -> None:
    with pytest.raises(ValueError, match="rate"):
        funnel_figure([FunnelPoint("x", 3, 1.5)], 0.1, _bands([1, 2, 3]))


def test_p_chart_marks_outside_months_runs_and_gaps() -> None:
    months = [PChartMonth(f"2026-{m:02d}", 0.1, 0.0, 0.3, in_run=m <= 8) for m in range(1, 9)]
    months += [PChartMonth("2026-09", None, None, None),
               PChartMonth("2026-10", 0.6, 0.0, 0.35, outside="above", link="/jobs?m=10")]
    fig = pchart_figure(months, 0.12, runs=[PChartRun(0, 7, "below")], title="Rework")
    squares = [r for r in fig.items if isinstance(r, Rect) and r.title]
    assert len(squares) == 8  # the run's months
    out = [c for c in fig.items if isinstance(c, Circle) and c.title and c.style == "flagged"]
    assert len(out) == 1 and out[0].link == "/jobs?m=10"
    texts = [t.text for t in fig.items if isinstance(t, Text)]
    assert "above" in texts and "8 in a row below" in texts
    # equal slots: the months' markers are evenly spaced
    xs = [r.x + r.width / 2 for r in squares]
    assert all(b - a == pytest.approx(xs[1] - xs[0]) for a, b in itertools.pairwise(xs))
    # September has no point and breaks the joining line: January–August joined, October alone
    joined = [p for p in fig.items if isinstance(p, Polyline) and p.style == "series3"]
    assert [len(p.points) for p in joined] == [8]
