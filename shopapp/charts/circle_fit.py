"""Residual-unbalance test plot: the readings at each test-mass position and the fitted circle.

Same geometry and primitives as :mod:`shopapp.charts.polar` (display 0° up,
angles clockwise, the shop's angle convention), so the job page (SVG) and the
certificate (reportlab) draw the same figure.

Two kinds of test (see :mod:`shopapp.balancing.verification`):

* **with phase** — each reading is a point (amplitude at its phase); the fitted
  circle is drawn with its centre (the residual's reading) marked;
* **amplitudes only** — each reading is a point at the *test-mass position*
  with the amplitude as its radius (the usual hand plot of this test); the fit
  ``a(θ) = ρ·√(1 + x² + 2x·cos(θ − φ))`` (ρ circle radius, x = R/T, φ the
  residual's angle) is drawn as a closed line.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from shopapp.balancing.phasors import to_display_deg
from shopapp.charts.polar import nice_ceiling, point
from shopapp.charts.primitives import Circle, Figure, Line, Polyline, Text
from shopapp.core.display import number, quantity

_MARGIN = 22.0
_LEGEND_ROW = 13.0
_CURVE_STEPS = 120


@dataclass(frozen=True)
class ReadingPoint:
    """A reading: test-mass position, amplitude and (optional) phase, internal degrees."""

    position_deg: float
    amplitude: float
    angle_deg: float | None = None


def circle_fit_figure(
    points: Sequence[ReadingPoint],
    *,
    method: str,
    circle_radius: float | None,
    centre_amplitude: float | None = None,
    centre_angle_deg: float | None = None,
    residual_ratio: float | None = None,
    residual_angle_deg: float | None = None,
    angle_sense: str = "with_rotation",
    angle_zero_deg: float = 0.0,
    title: str = "",
    unit_label: str = "",
    size: float = 240.0,
) -> Figure:
    """Build the residual-test plot.

    Parameters
    ----------
    points : sequence of ReadingPoint
        The readings (non-finite ones are skipped).
    method : {"phase", "amplitude"}
        How the test was evaluated (which geometry is drawn).
    circle_radius : float or None
        Fitted circle radius in reading units (None: invalid test, points only).
    centre_amplitude, centre_angle_deg : float, optional
        Fitted centre (phase method), reading units and internal degrees.
    residual_ratio, residual_angle_deg : float, optional
        ``R/T`` and the residual's angle (amplitude method's fitted curve).
    angle_sense, angle_zero_deg : str, float
        The shop's display convention.
    title, unit_label : str
        Caption and the readings' unit.
    size : float
        Width in points; the legend goes below the square plot.
    """
    pts = [p for p in points if math.isfinite(p.amplitude) and math.isfinite(p.position_deg)
           and (p.angle_deg is None or math.isfinite(p.angle_deg))]
    legend_h = 3 * _LEGEND_ROW + 6.0
    fig = Figure(width=size, height=size + legend_h, title=title,
                 description=f"Residual-unbalance test{' ' + title if title else ''}: readings "
                             f"in {unit_label or 'reading units'} and the fitted circle, "
                             "0° at the top, angles growing clockwise")
    cx, cy = size / 2.0, legend_h + size / 2.0
    plot_r = size / 2.0 - _MARGIN

    def disp(angle: float) -> float:
        return to_display_deg(angle, sense=angle_sense, zero_deg=angle_zero_deg)

    curve: list[tuple[float, float]] = []  # (magnitude, internal angle)
    phase = method == "phase"
    has_fit = circle_radius is not None and math.isfinite(circle_radius) and circle_radius > 0
    if has_fit and not phase and residual_ratio is not None:
        assert circle_radius is not None
        phi = math.radians(residual_angle_deg or 0.0)
        x = residual_ratio
        for i in range(_CURVE_STEPS):
            th = 2.0 * math.pi * i / _CURVE_STEPS
            curve.append((circle_radius * math.sqrt(max(1.0 + x * x + 2.0 * x * math.cos(th - phi),
                                                        0.0)), math.degrees(th)))
    biggest = max([p.amplitude for p in pts] + [m for m, _ in curve] + [0.0])
    if has_fit and phase and centre_amplitude is not None:
        assert circle_radius is not None
        biggest = max(biggest, centre_amplitude + circle_radius)
    outer = nice_ceiling(biggest)
    k = plot_r / outer

    for i in range(1, 5):
        fig.add(Circle(cx, cy, plot_r * i / 4.0, style="grid"))
    fig.add(Text(cx + 3.0, cy + plot_r + 2.0, number(outer, trim=True), style="small"))
    for i in range(12):
        d = i * 30.0
        x2, y2 = point(cx, cy, plot_r, d)
        fig.add(Line(cx, cy, x2, y2, style="grid"))
        lx, ly = point(cx, cy, plot_r + 10.0, d)
        fig.add(Text(lx, ly - 3.0, quantity(d, "°"), style="small", anchor="middle"))

    if has_fit and phase and centre_amplitude is not None and centre_angle_deg is not None:
        assert circle_radius is not None
        ccx, ccy = point(cx, cy, centre_amplitude * k, disp(centre_angle_deg))
        fig.add(Circle(ccx, ccy, circle_radius * k, style="fit", title="fitted circle"))
        if centre_amplitude * k >= 1.0:
            fig.add(Line(cx, cy, ccx, ccy, style="residual", arrow=True))
        fig.add(Circle(ccx, ccy, 1.5, style="point", title="centre: residual"))
    elif curve:
        fig.add(Polyline(tuple(point(cx, cy, m * k, disp(a)) for m, a in curve), style="fit",
                         closed=True))

    for n, p in enumerate(pts, start=1):
        ang = p.angle_deg if phase and p.angle_deg is not None else p.position_deg
        px, py = point(cx, cy, p.amplitude * k, disp(ang))
        text = f"position {n}: {number(p.amplitude, trim=True)} {unit_label}".strip()
        fig.add(Circle(px, py, 2.5, style="point", title=text))
        tx, ty = point(cx, cy, p.amplitude * k + 9.0, disp(ang))
        fig.add(Text(tx, ty - 3.0, str(n), style="small", anchor="middle"))

    y = legend_h - _LEGEND_ROW
    fig.add(Text(6.0, y, f"{title}  (outer ring {number(outer, trim=True)} {unit_label})".strip(),
                 style="label"))
    y -= _LEGEND_ROW
    fig.add(Circle(18.0, y + 3.0, 2.5, style="point"))
    where = "at their phase" if phase else "at the test-mass position"
    fig.add(Text(36.0, y, f"readings 1…{len(pts)}, {where}", style="small"))
    y -= _LEGEND_ROW
    fig.add(Line(6.0, y + 3.0, 30.0, y + 3.0, style="fit"))
    fig.add(Text(36.0, y, "fitted circle" if has_fit else "no circle fits these readings",
                 style="small"))
    return fig
