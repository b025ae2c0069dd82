"""Polar (Nyquist) plot of a run-up: the reading vector's tip as the speed changes.

Geometry as :mod:`shopapp.charts.polar` (which it reuses): display angle 0° up,
growing clockwise; a reading of amplitude ``a`` at display angle ``θ`` sits at
``(cx + a·k·sin θ, cy + a·k·cos θ)`` with ``k`` points per unit, the outer ring
rounded up to a 1-1.5-2-2.5-3-4-5-6-8 step. Through a resonance the tip runs
round a loop (a circle for a single lightly damped mode). Measured readings
are markers joined in speed order by a dotted line, fitted resonances solid
lines, marked points (the critical speed on the fit) squares; speed labels are
placed clear of each other and of the grid labels (:mod:`shopapp.charts.labels`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from shopapp.charts.labels import place
from shopapp.charts.polar import nice_ceiling, point
from shopapp.charts.primitives import Circle, Figure, Line, Polyline, Rect, Text
from shopapp.core.display import number, quantity

_MARGIN = 24.0
_LEGEND_ROW = 13.0


@dataclass(frozen=True)
class NyquistData:
    """``measured``: ``(speed rpm, amplitude, display °)`` in speed order; ``fitted``:
    curves of ``(amplitude, display °)``; ``marks``: ``(label, amplitude, display °)``."""

    measured: Sequence[tuple[float, float, float]]
    fitted: Sequence[Sequence[tuple[float, float]]]
    marks: Sequence[tuple[str, float, float]]
    unit: str


def nyquist_geometry(d: NyquistData, size: float) -> tuple[float, float, float, float]:
    """``(cx, cy, plot_r, outer)``: centre, radius of the outer ring (points) and its value."""
    legend_h = _LEGEND_ROW * (2 + bool(d.fitted) + bool(d.marks)) + 6.0
    cx, cy = size / 2.0, legend_h + size / 2.0
    plot_r = size / 2.0 - _MARGIN
    amps = [a for _, a, _ in d.measured] + [a for c in d.fitted for a, _ in c]
    amps += [a for _, a, _ in d.marks]
    finite = [a for a in amps if math.isfinite(a)]
    return cx, cy, plot_r, nice_ceiling(max(finite, default=1.0))


def nyquist_figure(d: NyquistData, *, title: str = "Polar (Nyquist) plot",
                   size: float = 320.0) -> Figure:
    """The plot: grid rings and spokes, fitted loops, measured tips, marks, legend."""
    cx, cy, plot_r, outer = nyquist_geometry(d, size)
    legend_h = cy - size / 2.0
    fig = Figure(size, size + legend_h, title=title,
                 description=f"{title}: reading vectors in {d.unit} as the speed changes, "
                             "0° at the top, angles growing clockwise")
    k = plot_r / outer
    texts: list[Text] = []

    def at(a: float, deg: float, extra: float = 0.0) -> tuple[float, float]:
        return point(cx, cy, a * k + extra, deg)

    for i in range(1, 5):
        fig.add(Circle(cx, cy, plot_r * i / 4.0, style="grid"))
    for frac in (0.5, 1.0):
        lx, ly = point(cx, cy, plot_r * frac - 6.0, 15.0)
        texts.append(Text(lx + 2.0, ly, number(outer * frac), style="small"))
    for i in range(12):
        deg = i * 30.0
        x2, y2 = point(cx, cy, plot_r, deg)
        fig.add(Line(cx, cy, x2, y2, style="grid"))
        lx, ly = point(cx, cy, plot_r + 11.0, deg)
        texts.append(Text(lx, ly - 3.0, quantity(deg, "°"), style="small", anchor="middle"))

    for curve in d.fitted:
        pts = tuple(at(a, deg) for a, deg in curve if math.isfinite(a) and math.isfinite(deg))
        if len(pts) >= 2:
            fig.add(Polyline(pts, style="series"))
    meas = [(s, a, deg) for s, a, deg in d.measured if math.isfinite(a) and math.isfinite(deg)]
    if len(meas) >= 2:
        fig.add(Polyline(tuple(at(a, deg) for _, a, deg in meas), style="series3"))
    for s, a, deg in meas:
        x, y = at(a, deg)
        fig.add(Circle(x, y, 2.4, style="point",
                       title=f"{quantity(s, 'rpm')}: {quantity(a, d.unit)} at "
                             f"{quantity(deg % 360.0, '°')}"))
    for label, a, deg in d.marks:
        x, y = at(a, deg)
        fig.add(Rect(x - 3.0, y - 3.0, 6.0, 6.0, style="point", title=label))

    labelled = [(quantity(s, "rpm"), a, deg) for s, a, deg in (meas[:1] + meas[-1:])]
    labelled = [*d.marks, *labelled] if len(meas) > 1 else [*d.marks]
    bounds = (2.0, legend_h, size - 2.0, size + legend_h - 2.0)
    for label, a, deg in labelled:
        candidates = []
        for extra in (10.0, -10.0, 18.0, -18.0):
            for turn in (0.0, 90.0, -90.0):
                x, y = at(a, deg)
                ox, oy = point(0.0, 0.0, abs(extra), deg + turn + (0.0 if extra > 0 else 180.0))
                anchor = "start" if ox > 2 else "end" if ox < -2 else "middle"
                candidates.append(Text(x + ox, y + oy - 3.0, label, style="small",
                                       anchor=anchor))
        spot = place(candidates, texts, bounds)
        if spot is not None:
            texts.append(spot)
    for t in texts:
        fig.add(t)

    y = legend_h - _LEGEND_ROW
    fig.add(Text(6.0, y, f"outer ring {number(outer)} {d.unit}; 0° at the top, clockwise",
                 style="label"))
    y -= _LEGEND_ROW
    fig.add(Circle(18.0, y + 3.0, 2.4, style="point"))
    fig.add(Line(6.0, y + 3.0, 30.0, y + 3.0, style="series3"))
    fig.add(Text(36.0, y, "measured, joined in speed order", style="small"))
    if d.fitted:
        y -= _LEGEND_ROW
        fig.add(Line(6.0, y + 3.0, 30.0, y + 3.0, style="series"))
        fig.add(Text(36.0, y, "fitted resonance", style="small"))
    if d.marks:
        y -= _LEGEND_ROW
        fig.add(Rect(15.0, y, 6.0, 6.0, style="point"))
        fig.add(Text(36.0, y, "critical speed on the fitted curve", style="small"))
    return fig
