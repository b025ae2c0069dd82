"""Polar plot of unbalance vectors with a tolerance circle, as a :class:`Figure`.

Geometry: display angle 0° points up (12 o'clock) and display angles grow
clockwise, like a dial; internal angles (direction of rotation from the
reference mark) are turned into display angles with the shop's convention
(:func:`shopapp.balancing.phasors.to_display_deg`), so the plot reads like the
numbers on the job page. A vector of magnitude ``m`` at display angle ``θ``
ends at ``(cx + m·k·sin θ, cy + m·k·cos θ)`` with ``k`` the scale (points per
unit). The scale is chosen so the largest vector or the tolerance circle
fills the plot, rounded up to a 1-1.5-2-2.5-3-4-5-6-8 step.

Each series is told apart by its line style (dash pattern and width, see
:mod:`shopapp.charts.styles`), by a text label at its tip and by the legend
below the plot, so the chart reads without colour. Used by the job page (SVG)
and by the certificate (reportlab), never drawn twice.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from shopapp.balancing.phasors import to_display_deg
from shopapp.charts.primitives import Circle, Figure, Line, Text
from shopapp.core.display import number, quantity

VECTOR_STYLES = ("initial", "check", "residual", "trial")
_NICE = (1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0, 10.0)
_LEGEND_ROW = 13.0
_MARGIN = 22.0


@dataclass(frozen=True)
class PolarVector:
    """One vector: a label, its magnitude (any unit, >= 0), internal angle and style."""

    label: str
    magnitude: float
    angle_deg: float
    style: str = "check"


def nice_ceiling(value: float) -> float:
    """Smallest 1-1.5-2-2.5-3-4-5-6-8 × 10^k not below ``value`` (1 for zero or less)."""
    if not math.isfinite(value) or value <= 0.0:
        return 1.0
    exp = math.floor(math.log10(value))
    base = 10.0**exp
    for step in _NICE:
        if step * base >= value * (1 - 1e-12):
            return step * base
    return 10.0 * base


def point(cx: float, cy: float, radius: float, display_deg: float) -> tuple[float, float]:
    """Figure coordinates of a point at ``radius`` and display angle (0 up, clockwise)."""
    a = math.radians(display_deg)
    return cx + radius * math.sin(a), cy + radius * math.cos(a)


def polar_figure(
    vectors: Sequence[PolarVector],
    *,
    limit: float | None = None,
    angle_sense: str = "with_rotation",
    angle_zero_deg: float = 0.0,
    title: str = "",
    unit_label: str = "g·mm",
    size: float = 260.0,
    spoke_deg: float = 30.0,
) -> Figure:
    """Build the polar plot.

    Parameters
    ----------
    vectors : sequence of PolarVector
        Drawn in order as arrows from the centre (styles ``initial``, ``check``,
        ``residual``, ``trial``); non-finite or negative magnitudes are skipped.
    limit : float, optional
        Tolerance in the same unit as the vectors: drawn as a circle (style ``limit``).
    angle_sense, angle_zero_deg : str, float
        The shop's display convention (see :func:`shopapp.balancing.phasors.to_display_deg`).
    title, unit_label : str
        Caption and unit shown in the legend.
    size : float
        Width of the figure in points; the plot is square, the legend below it.
    spoke_deg : float
        Spacing of the labelled angle spokes.
    """
    usable = [v for v in vectors if math.isfinite(v.magnitude) and v.magnitude >= 0.0
              and math.isfinite(v.angle_deg)]
    has_limit = limit is not None and math.isfinite(limit) and limit > 0.0
    rows = len(usable) + (1 if has_limit else 0) + 1
    legend_h = rows * _LEGEND_ROW + 6.0
    height = size + legend_h
    fig = Figure(width=size, height=height, title=title,
                 description=f"Polar plot{' ' + title if title else ''}: unbalance vectors in "
                             f"{unit_label}, 0° at the top, angles growing clockwise")
    cx, cy = size / 2.0, legend_h + size / 2.0
    plot_r = size / 2.0 - _MARGIN
    biggest = max([v.magnitude for v in usable]
                  + ([limit] if has_limit and limit is not None else []) + [0.0])
    outer = nice_ceiling(biggest)
    k = plot_r / outer

    # Grid: four rings and the spokes, labels in display degrees.
    for i in range(1, 5):
        fig.add(Circle(cx, cy, plot_r * i / 4.0, style="grid"))
    # Ring values along the 15° direction, clear of the 0° label.
    for frac in (0.5, 1.0):
        lx, ly = point(cx, cy, plot_r * frac - 6.0, 15.0)
        fig.add(Text(lx + 2.0, ly, number(outer * frac, trim=True), style="small"))
    n_spokes = max(1, round(360.0 / spoke_deg))
    for i in range(n_spokes):
        d = i * 360.0 / n_spokes
        x2, y2 = point(cx, cy, plot_r, d)
        fig.add(Line(cx, cy, x2, y2, style="grid"))
        lx, ly = point(cx, cy, plot_r + 10.0, d)
        fig.add(Text(lx, ly - 3.0, quantity(d, "°"), style="small", anchor="middle"))
    if has_limit:
        assert limit is not None
        fig.add(Circle(cx, cy, limit * k, style="limit",
                       title=f"limit {number(limit, trim=True)} {unit_label}"))

    for v in usable:
        d = to_display_deg(v.angle_deg, sense=angle_sense, zero_deg=angle_zero_deg)
        style = v.style if v.style in VECTOR_STYLES else "check"
        x2, y2 = point(cx, cy, v.magnitude * k, d)
        if v.magnitude * k < 1.0:
            fig.add(Circle(cx, cy, 2.0, style="point", title=v.label))
        else:
            fig.add(Line(cx, cy, x2, y2, style=style, arrow=True))
        tx, ty = point(cx, cy, v.magnitude * k + 8.0, d)
        fig.add(Text(tx, ty - 3.0, _short(v.label), style="small", anchor="middle"))

    # Legend: a line sample in the series' style, the label, magnitude and display angle.
    y = legend_h - _LEGEND_ROW
    fig.add(Text(6.0, y, f"{title}  (outer ring {number(outer, trim=True)} {unit_label})".strip(),
                 style="label"))
    for v in usable:
        y -= _LEGEND_ROW
        d = to_display_deg(v.angle_deg, sense=angle_sense, zero_deg=angle_zero_deg)
        style = v.style if v.style in VECTOR_STYLES else "check"
        fig.add(Line(6.0, y + 3.0, 30.0, y + 3.0, style=style))
        fig.add(Text(36.0, y, f"{_short(v.label)} {v.label}: "
                              f"{number(v.magnitude, trim=True)} {unit_label} "
                              f"at {quantity(d, '°')}", style="small"))
    if has_limit:
        assert limit is not None
        y -= _LEGEND_ROW
        fig.add(Line(6.0, y + 3.0, 30.0, y + 3.0, style="limit"))
        fig.add(Text(36.0, y, f"tolerance {number(limit, trim=True)} {unit_label}", style="small"))
    return fig


def _short(label: str) -> str:
    """Tip label: the run number when the label names one (``run 3`` → ``3``), else initial."""
    if "run " in label:
        return label.rsplit("run ", 1)[1].rstrip(")")
    return label[:1].upper()
