"""Line charts over a numeric x axis (speed, time), as a :class:`Figure`.

Geometry: a panel is a :class:`Box` in figure points (y up). A value ``v`` on an
axis ``[lo, hi]`` sits at ``start + (v − lo)/(hi − lo)·length``. Axis ends are the
data rounded out to whole tick steps (1-2-2.5-5 × 10^k, or a given list such as
45°/90° for angles); the number of ticks is the largest (up to 8) whose labels
fit the axis with a gap (:mod:`shopapp.charts.labels`), so tick labels never run
into each other. Tick labels go through :func:`shopapp.core.display.fixed` with
as many decimals as the step needs (never an exponent).

What a panel can hold: series (a polyline broken at None, optional markers),
x bands (shaded speed ranges, e.g. where a balancer is stable) and vertical
markers (a critical speed, the operating speed) whose labels are placed inside
the panel clear of each other. Series are told apart by line style and marker
shape, as in :mod:`shopapp.charts.trend`; the legend below the plot shows both.
Used by the resonance pages (Bode plot, loose-mass charts).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

from shopapp.charts.labels import place, text_width
from shopapp.charts.primitives import Circle, Figure, Line, Polyline, Rect, Text
from shopapp.charts.styles import style
from shopapp.core.display import fixed

STEPS: tuple[float, ...] = (1.0, 2.0, 2.5, 5.0)
ANGLE_STEPS: tuple[float, ...] = (15.0, 30.0, 45.0, 90.0, 180.0, 360.0)
MAX_TICKS = 8
TICK_FONT = style("small").font_size
_MARKER_R = 2.6
_LEGEND_ROW = 13.0


@dataclass(frozen=True)
class Box:
    """A plot area: lower-left corner and size, figure points (y up)."""

    left: float
    bottom: float
    width: float
    height: float

    @property
    def right(self) -> float:
        return self.left + self.width

    @property
    def top(self) -> float:
        return self.bottom + self.height

    def contains(self, x: float, y: float, tol: float = 1e-6) -> bool:
        return (self.left - tol <= x <= self.right + tol
                and self.bottom - tol <= y <= self.top + tol)


@dataclass(frozen=True)
class Axis:
    """A linear axis from ``lo`` to ``hi`` with ticks every ``step``."""

    lo: float
    hi: float
    step: float

    @property
    def ticks(self) -> list[float]:
        n = round((self.hi - self.lo) / self.step)
        return [self.lo + k * self.step for k in range(n + 1)]

    def to(self, v: float, start: float, length: float) -> float:
        return start + (v - self.lo) / (self.hi - self.lo) * length

    def label(self, v: float) -> str:
        return tick_text(v, self.step)


def decimals_for(step: float) -> int:
    """Decimals a tick step needs (2.5 → 1, 0.25 → 2, 500 → 0)."""
    for d in range(7):
        scaled = step * 10**d
        if abs(scaled - round(scaled)) < 1e-6 * max(1.0, scaled):
            return d
    return 6


def tick_text(v: float, step: float) -> str:
    """A tick value with the decimals its step needs, never ``-0``."""
    d = decimals_for(step)
    if abs(v) < step * 1e-9:
        v = 0.0
    return fixed(v, d)


def _step(span: float, count: int, steps: Sequence[float], scaled: bool) -> float:
    raw = span / max(1, count)
    if not scaled:
        for s in steps:
            if s >= raw * (1 - 1e-9):
                return s
        return steps[-1] * math.ceil(raw / steps[-1])
    base = 10.0 ** math.floor(math.log10(raw))
    for s in (*steps, 10.0):
        if s * base >= raw * (1 - 1e-9):
            return s * base
    return 10.0 * base


def nice_axis(lo: float, hi: float, count: int = 5, steps: Sequence[float] | None = None
              ) -> Axis:
    """``[lo, hi]`` rounded out to whole steps giving about ``count`` intervals.

    ``steps`` fixes the allowed steps (e.g. :data:`ANGLE_STEPS`); by default a
    1-2-2.5-5 × 10^k step.
    """
    if not (math.isfinite(lo) and math.isfinite(hi)):
        lo, hi = 0.0, 1.0
    if hi <= lo:
        pad = abs(lo) * 0.1 or 1.0
        lo, hi = lo - pad, hi + pad
    step = _step(hi - lo, count, steps or STEPS, steps is None)
    a0 = math.floor(lo / step + 1e-9) * step
    a1 = math.ceil(hi / step - 1e-9) * step
    if a1 <= a0:
        a1 = a0 + step
    return Axis(a0, a1, step)


def fitted_axis(lo: float, hi: float, length: float, *, horizontal: bool,
                steps: Sequence[float] | None = None) -> Axis:
    """The axis with the most ticks (up to 8) whose labels fit ``length`` points."""
    best = nice_axis(lo, hi, 1, steps)
    for count in range(MAX_TICKS, 0, -1):
        axis = nice_axis(lo, hi, count, steps)
        ticks = axis.ticks
        if len(ticks) < 2:
            continue
        spacing = length / (len(ticks) - 1)
        if horizontal:
            need = max(text_width(axis.label(v), TICK_FONT) for v in ticks) + 6.0
        else:
            need = 1.05 * TICK_FONT + 4.0
        if spacing >= need:
            return axis
        best = axis
    return best


def widest_label(axis: Axis) -> float:
    return max(text_width(axis.label(v), TICK_FONT) for v in axis.ticks)


@dataclass(frozen=True)
class XYSeries:
    """A named series: x values and y values (None breaks the line)."""

    label: str
    x: Sequence[float]
    y: Sequence[float | None]
    style: str = "series"
    line: bool = True
    marker: str | None = None  # "circle" | "square" | None
    titles: Sequence[str] | None = None


@dataclass(frozen=True)
class XBand:
    """A shaded x range (full panel height)."""

    lo: float
    hi: float
    label: str
    style: str = "bar2"


@dataclass(frozen=True)
class VMarker:
    """A vertical line at ``x`` with a short label inside the panel."""

    x: float
    label: str
    style: str = "limit"
    legend: str | None = None


@dataclass
class Panel:
    """What :func:`draw_panel` draws into one box."""

    box: Box
    x_axis: Axis
    y_axis: Axis
    series: Sequence[XYSeries] = ()
    bands: Sequence[XBand] = ()
    markers: Sequence[VMarker] = ()
    y_label: str = ""
    x_labels: bool = True
    marker_labels: bool = True
    placed: list[Text] = field(default_factory=list)


def _marker(shape: str, x: float, y: float, title: str | None) -> Circle | Rect:
    r = _MARKER_R
    if shape == "square":
        return Rect(x - r, y - r, 2 * r, 2 * r, style="point", title=title)
    return Circle(x, y, r, style="point", title=title)


def draw_panel(fig: Figure, p: Panel) -> list[Text]:
    """Draw grid, ticks, bands, series and markers of one panel; returns its texts."""
    b, xa, ya = p.box, p.x_axis, p.y_axis
    texts: list[Text] = []

    def px(v: float) -> float:
        return xa.to(v, b.left, b.width)

    def py(v: float) -> float:
        return ya.to(v, b.bottom, b.height)

    for band in p.bands:
        lo, hi = max(band.lo, xa.lo), min(band.hi, xa.hi)
        if hi > lo:
            fig.add(Rect(px(lo), b.bottom, px(hi) - px(lo), b.height, style=band.style,
                         title=band.label))
    for k, v in enumerate(ya.ticks):
        yy = py(v)
        fig.add(Line(b.left, yy, b.right, yy, style="axis" if k == 0 else "grid"))
        texts.append(Text(b.left - 4.0, yy - 3.0, ya.label(v), style="small", anchor="end"))
    for v in xa.ticks:
        xx = px(v)
        fig.add(Line(xx, b.bottom, xx, b.top, style="grid"))
        fig.add(Line(xx, b.bottom, xx, b.bottom - 3.0, style="axis"))
        if p.x_labels:
            texts.append(Text(xx, b.bottom - 12.0, xa.label(v), style="small", anchor="middle"))
    fig.add(Line(b.left, b.bottom, b.left, b.top, style="axis"))
    fig.add(Line(b.left, b.bottom, b.right, b.bottom, style="axis"))
    if p.y_label:
        texts.append(Text(b.left - widest_label(ya) - 8.0, b.top + 9.0, p.y_label, style="small"))
    for s in p.series:
        pts = [(px(x), py(y)) if y is not None and math.isfinite(y) else None
               for x, y in zip(s.x, s.y, strict=True)]
        if s.line:
            run: list[tuple[float, float]] = []
            for q in [*pts, None]:
                if q is not None and b.contains(*q):
                    run.append(q)
                    continue
                if len(run) >= 2:
                    fig.add(Polyline(tuple(run), style=s.style))
                run = []
        if s.marker:
            for i, q in enumerate(pts):
                if q is not None and b.contains(*q):
                    fig.add(_marker(s.marker, q[0], q[1], s.titles[i] if s.titles else None))
    placed = [*p.placed, *texts]
    for m in p.markers:
        if not xa.lo <= m.x <= xa.hi:
            continue
        xx = px(m.x)
        fig.add(Line(xx, b.bottom, xx, b.top, style=m.style))
        if not p.marker_labels:
            continue
        candidates = []
        for row in range(4):
            yy = b.top - 10.0 - 11.0 * row
            candidates.append(Text(xx + 3.0, yy, m.label, style="small"))
            candidates.append(Text(xx - 3.0, yy, m.label, style="small", anchor="end"))
        spot = place(candidates, placed, (b.left, b.bottom, b.right, b.top))
        if spot is not None:
            placed.append(spot)
            texts.append(spot)
    for t in texts:
        fig.add(t)
    return texts


def legend(fig: Figure, entries: Sequence[tuple[str, str, str]], left: float, top: float,
           width: float) -> float:
    """Legend rows below a plot: ``(label, kind, style)`` with kind ``line``, ``band``,
    ``circle`` or ``square``; two to a row when they fit. Returns the height used."""
    if not entries:
        return 0.0
    widest = max(text_width(label, TICK_FONT) for label, _, _ in entries) + 32.0
    per_row = 2 if widest <= width / 2 else 1
    col_w = width / per_row
    for i, (label, kind, st) in enumerate(entries):
        lx = left + (i % per_row) * col_w
        ly = top - _LEGEND_ROW * (i // per_row + 1)
        if kind == "band":
            fig.add(Rect(lx, ly - 1.0, 22.0, 8.0, style=st))
        elif kind in ("circle", "square"):
            fig.add(_marker(kind, lx + 11.0, ly + 3.0, None))
        else:
            fig.add(Line(lx, ly + 3.0, lx + 22.0, ly + 3.0, style=st))
        fig.add(Text(lx + 27.0, ly, label, style="small"))
    return _LEGEND_ROW * math.ceil(len(entries) / per_row)


def legend_entries(series: Sequence[XYSeries], bands: Sequence[XBand],
                   markers: Sequence[VMarker]) -> list[tuple[str, str, str]]:
    out = [(s.label, "line" if s.line else (s.marker or "circle"), s.style) for s in series]
    seen = set()
    for band in bands:
        if band.label not in seen:
            out.append((band.label, "band", band.style))
            seen.add(band.label)
    for m in markers:
        if m.legend and m.legend not in seen:
            out.append((m.legend, "line", m.style))
            seen.add(m.legend)
    return out


def _span(values: Sequence[float | None]) -> tuple[float, float]:
    finite = [v for v in values if v is not None and math.isfinite(v)]
    return (min(finite), max(finite)) if finite else (0.0, 1.0)


def xy_figure(
    series: Sequence[XYSeries],
    *,
    title: str = "",
    x_label: str = "",
    y_label: str = "",
    bands: Sequence[XBand] = (),
    markers: Sequence[VMarker] = (),
    x_range: tuple[float, float] | None = None,
    y_min: float | None = None,
    width: float = 540.0,
    height: float = 260.0,
) -> Figure:
    """One panel with its legend below; x from the data (or ``x_range``), y rounded out
    from the data and ``y_min`` (e.g. 0 for amplitudes)."""
    fig = Figure(width, height, title=title, description=f"{title}: {y_label} against "
                 f"{x_label}; " + "; ".join(s.label for s in series))
    entries = legend_entries(series, bands, markers)
    xs = [x for s in series for x in s.x] + [m.x for m in markers]
    xs += [v for band in bands for v in (band.lo, band.hi)]
    x_lo, x_hi = x_range if x_range is not None else _span(xs)
    y_lo, y_hi = _span([y for s in series for y in s.y])
    if y_min is not None:
        y_lo = min(y_lo, y_min)
    top = 34.0 if title else 18.0
    legend_w = width - 22.0
    legend_h = legend(Figure(width, height), entries, 0.0, 0.0, legend_w)  # measure only
    bottom = 34.0 + legend_h + (12.0 if x_label else 0.0)
    plot_h = height - top - bottom
    y_axis = fitted_axis(y_lo, y_hi, plot_h, horizontal=False)
    left = max(34.0, widest_label(y_axis) + 10.0)
    box = Box(left, bottom, width - left - 14.0, plot_h)
    x_axis = fitted_axis(x_lo, x_hi, box.width, horizontal=True)
    if title:
        fig.add(Text(left, height - 14.0, title, style="title"))
    texts = draw_panel(fig, Panel(box, x_axis, y_axis, series, bands, markers, y_label))
    if x_label:
        t = Text(box.right, box.bottom - 25.0, x_label, style="small", anchor="end")
        fig.add(t)
        texts.append(t)
    legend(fig, entries, 8.0, box.bottom - 28.0 - (12.0 if x_label else 0.0), legend_w)
    return fig

