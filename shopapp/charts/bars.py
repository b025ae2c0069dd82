"""Horizontal bar chart, one group of bars per category, as a :class:`Figure`.

Geometry: categories are rows from the top; row ``i`` has its centre at
``y = height − top − (i + 0.5)·row_h``; inside a row the ``k`` bars of the series
stack downwards, each ``bar_h`` tall. A value ``v`` is a bar from ``x = left`` to
``left + v / x1 · plot_w`` with ``x1`` the largest value rounded up to a
1-2-2.5-5 × 10^k tick step (or the given ``x_max``, e.g. 1 for rates).

Readable without colour: the series differ by fill from light to dark grey
(styles ``bar2``, ``bar``, ``bar_bad``), every bar has its value written at its
end, and the legend names the series in the same order as the bars in a row. Each
bar may carry a link (drill-down to the jobs behind it) and a tooltip.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

from shopapp.charts.primitives import Figure, Line, Rect, Text
from shopapp.charts.trend import nice_step
from shopapp.core.display import number

BAR_STYLES: tuple[str, ...] = ("bar2", "bar", "bar_bad")
_CHAR_W = 0.62  # average glyph width / font size (a wide sans such as DejaVu), for fitting labels


@dataclass(frozen=True)
class Bar:
    value: float
    link: str | None = None
    title: str | None = None
    text: str | None = None  # written at the bar's end; default: the formatted value


@dataclass(frozen=True)
class BarGroup:
    """One category (a row): its label and one bar per series."""

    label: str
    bars: Sequence[Bar]


def _clip(text: str, max_chars: int) -> str:
    return text if len(text) <= max_chars else text[: max(1, max_chars - 1)] + "…"


def bar_figure(
    groups: Sequence[BarGroup],
    *,
    series: Sequence[str],
    title: str = "",
    x_max: float | None = None,
    value_format: Callable[[float], str] = lambda v: number(v, trim=True),
    styles: Sequence[str] = BAR_STYLES,
    width: float = 520.0,
    bar_h: float = 10.0,
    gap: float = 6.0,
    label_chars: int = 26,
) -> Figure:
    """Build the bar chart.

    Parameters
    ----------
    groups : sequence of BarGroup
        One row per category, each with ``len(series)`` bars (values ≥ 0).
    series : sequence of str
        Legend names of the bars of a row, in order.
    x_max : float, optional
        Fixed right end of the value axis; otherwise the largest value rounded up.
    value_format : callable
        Text of a value (ticks and bar-end labels); default three significant figures
        without trailing zeros (:func:`shopapp.core.display.number`).

    Returns
    -------
    Figure
        Its height grows with the number of rows; an empty ``groups`` gives a
        figure that says so.
    """
    for g in groups:
        if len(g.bars) != len(series):
            raise ValueError(f"row {g.label!r} has {len(g.bars)} bars for {len(series)} series")
        for b in g.bars:
            if not math.isfinite(b.value) or b.value < 0:
                raise ValueError(f"row {g.label!r}: bar value {b.value!r} is not a number ≥ 0")
    k = max(1, len(series))
    row_h = k * bar_h + gap
    top = 24.0 if title else 8.0
    legend_h = 16.0
    bottom = 18.0 + legend_h
    longest = max((len(g.label) for g in groups), default=4)
    left = 8.0 + min(longest, label_chars) * 9.0 * _CHAR_W
    right = 40.0
    n = max(1, len(groups))
    height = top + n * row_h + bottom
    fig = Figure(width, height, title=title,
                 description=f"{title}: " + ", ".join(series) + f" for {len(groups)} rows")
    if title:
        fig.add(Text(8.0, height - 16.0, title, style="title"))
    plot_w = width - left - right
    plot_top = height - top
    if not groups:
        fig.add(Text(left, plot_top - row_h / 2, "no jobs in this period", style="small"))
        return fig
    largest = max(b.value for g in groups for b in g.bars)
    if x_max is not None:
        x1 = x_max
    else:
        step = nice_step(largest or 1.0, 4)
        x1 = math.ceil((largest or 1.0) / step - 1e-9) * step
    step = nice_step(x1, 4)
    t = 0
    while t * step <= x1 * (1 + 1e-9):
        tx = left + t * step / x1 * plot_w
        fig.add(Line(tx, bottom, tx, plot_top, style="grid" if t else "axis"))
        fig.add(Text(tx, bottom - 11.0, value_format(t * step), style="small", anchor="middle"))
        t += 1
    for i, g in enumerate(groups):
        row_top = plot_top - i * row_h - gap / 2
        centre = row_top - k * bar_h / 2
        fig.add(Text(left - 6.0, centre - 3.0, _clip(g.label, label_chars), anchor="end"))
        for j, b in enumerate(g.bars):
            y = row_top - (j + 1) * bar_h
            w = min(b.value, x1) / x1 * plot_w
            style_name = styles[j % len(styles)]
            tip = b.title or f"{g.label}, {series[j]}: {value_format(b.value)}"
            fig.add(Rect(left, y + 0.5, max(w, 0.0), bar_h - 1.0, style=style_name, link=b.link,
                         title=tip))
            fig.add(Text(left + w + 3.0, y + 2.0, b.text or value_format(b.value),
                         style="small"))
    # legend
    lx = left
    for j, name in enumerate(series):
        fig.add(Rect(lx, 4.0, 10.0, 8.0, style=styles[j % len(styles)]))
        fig.add(Text(lx + 14.0, 5.0, name, style="small"))
        lx += 24.0 + len(name) * 7.5 * _CHAR_W
    return fig
