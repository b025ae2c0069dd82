"""Bar chart geometry: bar lengths proportional to values, links, legend, empty case.

Expected geometry follows from the module's stated formula (length = v / x1 · plot
width); common practice for bar charts, no external source.
"""

from __future__ import annotations

import pytest

from shopapp.charts import Rect, Text
from shopapp.charts.bars import Bar, BarGroup, bar_figure
from shopapp.charts.svg import to_svg
from shopapp.charts.trend import nice_step


def _bars(fig):  # type: ignore[no-untyped-def]
    return [i for i in fig.items if isinstance(i, Rect) and i.link is not None]


def test_bar_lengths_are_proportional_to_values_and_share_one_origin() -> None:
    groups = [
        BarGroup("HS-T1 fan", [Bar(8, link="/jobs?a=1"), Bar(2, link="/jobs?a=1&r=1")]),
        BarGroup("HS-T2 pump", [Bar(4, link="/jobs?a=2"), Bar(1, link="/jobs?a=2&r=1")]),
    ]
    fig = bar_figure(groups, series=["reached tolerance", "reworked"], x_max=10)
    bars = _bars(fig)
    assert len(bars) == 4
    assert len({b.x for b in bars}) == 1  # all bars start at the value axis
    widths = [b.width for b in bars]
    assert widths[0] / widths[2] == pytest.approx(2.0)  # 8 / 4
    assert widths[1] / widths[3] == pytest.approx(2.0)  # 2 / 1
    assert widths[0] / widths[1] == pytest.approx(4.0)  # 8 / 2
    # the first row is above the second (y grows upward)
    assert bars[0].y > bars[2].y
    # series told apart by fill style, named in the legend
    assert bars[0].style != bars[1].style
    texts = [t.text for t in fig.items if isinstance(t, Text)]
    assert "reached tolerance" in texts and "reworked" in texts
    assert "8" in texts and "1" in texts  # values written at the bar ends


def test_axis_end_is_rounded_up_to_a_tick() -> None:
    fig = bar_figure([BarGroup("a", [Bar(7.0)]), BarGroup("b", [Bar(3.5)])], series=["jobs"])
    bars = [i for i in fig.items if isinstance(i, Rect) and i.title]
    # 7 rounds up to 8 with a 2-step: the bar of 7 fills 7/8 of the plot width
    full = bars[0].width / (7 / 8)
    assert bars[1].width == pytest.approx(full * 3.5 / 8)
    assert nice_step(7.0, 4) == 2.0
    assert nice_step(100.0, 5) == 20.0
    assert nice_step(0.9, 4) == 0.25


def test_rows_add_height_and_links_reach_the_svg() -> None:
    one = bar_figure([BarGroup("a", [Bar(1, link="/jobs?operator_id=3")])], series=["jobs"])
    three = bar_figure([BarGroup(n, [Bar(1)]) for n in "abc"], series=["jobs"])
    assert three.height > one.height
    svg = to_svg(one)
    assert '<a href="/jobs?operator_id=3">' in svg
    assert "<title>a, jobs: 1</title>" in svg


def test_empty_and_bad_input() -> None:
    fig = bar_figure([], series=["jobs"], title="Rework by operator")
    assert any(isinstance(i, Text) and "no jobs" in i.text for i in fig.items)
    with pytest.raises(ValueError, match="2 series"):
        bar_figure([BarGroup("a", [Bar(1)])], series=["x", "y"])
    with pytest.raises(ValueError, match="not a number"):
        bar_figure([BarGroup("a", [Bar(-1)])], series=["x"])
