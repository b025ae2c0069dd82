"""Trend chart: one or more series over an x axis of dates or labels, as a :class:`Figure`.

Geometry: the plot area spans ``[left, width − right] × [bottom, height − top]`` in
figure points (y up). With labels the x positions are equally spaced category
centres; with dates they are proportional to time (irregular visits of a rotor
keep their spacing). A value ``v`` sits at ``y = bottom + (v − y0)/(y1 − y0)·h``
with ``[y0, y1]`` rounded out to a 1-2-2.5-5 × 10^k tick step (about five ticks).

Series are told apart without colour: each has its own line style (dash pattern
and width) *and* its own marker shape (circle, square, triangle, diamond, in that
order), and the legend shows both. Missing values (None) break the line. Circle
and square markers carry a link and a tooltip (title); triangle and diamond
markers are polygons, which the primitives cannot link, so series that need links
should come first. An optional horizontal limit line (style ``limit``) marks a
tolerance or a goal. Used by the dashboard, the monthly report and rotor history.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

from shopapp.charts.primitives import Circle, Figure, Line, Polyline, Rect, Text
from shopapp.core.display import number

MARKERS: tuple[str, ...] = ("circle", "square", "triangle", "diamond")
SERIES_STYLES: tuple[str, ...] = ("series", "series2", "series3")
_MARKER_R = 3.2
_LEGEND_ROW = 13.0
_STEPS = (1.0, 2.0, 2.5, 5.0, 10.0)


@dataclass(frozen=True)
class TrendSeries:
    """A named series: one value (or None) per x position, with optional links."""

    label: str
    values: Sequence[float | None]
    style: str | None = None  # default: by position in SERIES_STYLES
    marker: str | None = None  # default: by position in MARKERS
    links: Sequence[str | None] | None = None
    titles: Sequence[str | None] | None = None


def nice_step(span: float, ticks: int = 5) -> float:
    """A 1-2-2.5-5 × 10^k step giving about ``ticks`` intervals over ``span`` (> 0)."""
    if not math.isfinite(span) or span <= 0:
        return 1.0
    raw = span / max(1, ticks)
    base = 10.0 ** math.floor(math.log10(raw))
    for s in _STEPS:
        if s * base >= raw * (1 - 1e-9):
            return s * base
    return 10.0 * base


def y_range(values: Sequence[float], *, y_min: float | None = None, y_max: float | None = None,
            ticks: int = 5) -> tuple[float, float, float]:
    """``(y0, y1, step)``: the data (and fixed ends) rounded out to whole tick steps."""
    finite = [v for v in values if v is not None and math.isfinite(v)]
    lo = y_min if y_min is not None else min([0.0, *finite])
    hi = y_max if y_max is not None else max([*finite, lo + 1.0]) if finite else lo + 1.0
    if hi <= lo:
        hi = lo + 1.0
    step = nice_step(hi - lo, ticks)
    y0 = lo if y_min is not None else math.floor(lo / step + 1e-9) * step
    y1 = hi if y_max is not None else math.ceil(hi / step - 1e-9) * step
    return y0, y1, step


def _marker(shape: str, x: float, y: float, style: str, link: str | None,
            title: str | None) -> Circle | Rect | Polyline:
    r = _MARKER_R
    if shape == "square":
        return Rect(x - r, y - r, 2 * r, 2 * r, style=style, link=link, title=title)
    if shape == "triangle":
        return Polyline(((x, y + r * 1.2), (x + r * 1.1, y - r * 0.9), (x - r * 1.1, y - r * 0.9)),
                        style=style, closed=True)
    if shape == "diamond":
        return Polyline(((x, y + r * 1.3), (x + r * 1.3, y), (x, y - r * 1.3), (x - r * 1.3, y)),
                        style=style, closed=True)
    return Circle(x, y, r, style=style, link=link, title=title)


def _x_positions(xs: Sequence[str | dt.date], left: float, plot_w: float) -> list[float]:
    n = len(xs)
    if n and all(isinstance(x, dt.date) for x in xs):
        days = [x.toordinal() for x in xs]  # type: ignore[union-attr]
        first, last = min(days), max(days)
        if last == first:
            return [left + plot_w / 2] * n
        pad = plot_w * 0.04
        return [left + pad + (d - first) / (last - first) * (plot_w - 2 * pad) for d in days]
    step = plot_w / max(n, 1)
    return [left + step * (i + 0.5) for i in range(n)]


def trend_figure(
    x: Sequence[str | dt.date],
    series: Sequence[TrendSeries],
    *,
    title: str = "",
    y_label: str = "",
    y_min: float | None = None,
    y_max: float | None = None,
    limit: float | None = None,
    limit_label: str = "limit",
    y_format: Callable[[float], str] = lambda v: number(v, trim=True),
    x_format: Callable[[str | dt.date], str] | None = None,
    width: float = 520.0,
    height: float = 240.0,
    max_x_labels: int = 12,
) -> Figure:
    """Build the trend chart.

    Parameters
    ----------
    x : sequence of str or datetime.date
        The x positions: category labels (equally spaced) or dates (spaced by time).
    series : sequence of TrendSeries
        Each with one value per x position (None = no value there).
    y_min, y_max : float, optional
        Fixed ends of the y axis (e.g. 0 and 1 for rates); otherwise rounded out.
    limit : float, optional
        A horizontal limit line (tolerance, goal), included in the y range.
    y_format, x_format : callable
        Tick label text for a y value and for an x position.

    Returns
    -------
    Figure
        Axes, y ticks with grid lines, x labels (thinned to ``max_x_labels``), one
        polyline and marker set per series, the limit line and a legend below.
    """
    for s in series:
        if len(s.values) != len(x):
            raise ValueError(f"series {s.label!r} has {len(s.values)} values for {len(x)} x "
                             "positions")
    fig = Figure(width, height, title=title,
                 description=f"{title}: " + "; ".join(s.label for s in series))
    legend_h = _LEGEND_ROW * math.ceil(max(len(series) + (limit is not None), 1) / 3)
    left, right = 44.0, 14.0
    top = 22.0 if title else 10.0
    bottom = 30.0 + legend_h
    plot_w, plot_h = width - left - right, height - top - bottom
    values = [v for s in series for v in s.values if v is not None]
    if limit is not None:
        values.append(limit)
    y0, y1, step = y_range(values, y_min=y_min, y_max=y_max)

    def ypos(v: float) -> float:
        return bottom + (v - y0) / (y1 - y0) * plot_h

    if title:
        fig.add(Text(left, height - 14.0, title, style="title"))
    if y_label:
        fig.add(Text(4.0, height - top + 2.0, y_label, style="small"))
    # y ticks and grid
    k = 0
    while True:
        tick = y0 + k * step
        if tick > y1 + step * 1e-6:
            break
        yy = ypos(tick)
        fig.add(Line(left, yy, left + plot_w, yy, style="grid" if k else "axis"))
        fig.add(Text(left - 4.0, yy - 3.0, y_format(tick), style="small", anchor="end"))
        k += 1
    fig.add(Line(left, bottom, left, bottom + plot_h, style="axis"))
    # x labels
    xs = _x_positions(x, left, plot_w)
    every = max(1, math.ceil(len(x) / max(1, max_x_labels)))
    fmt = x_format or (lambda v: v.isoformat() if isinstance(v, dt.date) else str(v))
    for i, (xv, px) in enumerate(zip(x, xs, strict=True)):
        fig.add(Line(px, bottom, px, bottom - 3.0, style="axis"))
        if i % every == 0:
            fig.add(Text(px, bottom - 13.0, fmt(xv), style="small", anchor="middle"))
    # limit line
    if limit is not None:
        fig.add(Line(left, ypos(limit), left + plot_w, ypos(limit), style="limit"))
    # series
    for idx, s in enumerate(series):
        line_style = s.style or SERIES_STYLES[idx % len(SERIES_STYLES)]
        shape = s.marker or MARKERS[idx % len(MARKERS)]
        segment: list[tuple[float, float]] = []
        segments: list[list[tuple[float, float]]] = [segment]
        for px, v in zip(xs, s.values, strict=True):
            if v is None:
                segment = []
                segments.append(segment)
            else:
                segment.append((px, ypos(v)))
        for seg in segments:
            if len(seg) >= 2:
                fig.add(Polyline(tuple(seg), style=line_style))
        for i, (px, v) in enumerate(zip(xs, s.values, strict=True)):
            if v is None:
                continue
            link = s.links[i] if s.links else None
            tip = s.titles[i] if s.titles else f"{s.label}, {fmt(x[i])}: {y_format(v)}"
            fig.add(_marker(shape, px, ypos(v), "point", link, tip))
    # legend: line sample + marker + label, three to a row
    entries: list[tuple[str, str, str | None]] = [
        (s.label, s.style or SERIES_STYLES[i % len(SERIES_STYLES)],
         s.marker or MARKERS[i % len(MARKERS)]) for i, s in enumerate(series)
    ]
    if limit is not None:
        entries.append((limit_label, "limit", None))
    col_w = plot_w / 3
    for i, (label, line_style, legend_shape) in enumerate(entries):
        lx = left + (i % 3) * col_w
        ly = bottom - 28.0 - (i // 3) * _LEGEND_ROW
        fig.add(Line(lx, ly + 3.0, lx + 22.0, ly + 3.0, style=line_style))
        if legend_shape:
            fig.add(_marker(legend_shape, lx + 11.0, ly + 3.0, "point", None, None))
        fig.add(Text(lx + 27.0, ly, label, style="small"))
    return fig

