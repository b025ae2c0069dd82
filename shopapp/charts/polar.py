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

Labels: angle labels sit outside the outer ring; ring values and tip labels
are placed by :func:`shopapp.charts.labels.place`, clear of every text already
placed, so no two labels overlap (the tests check the boxes).

Zoom: when a check or residual vector is drawn shorter than
:data:`ZOOM_BELOW` of the plot radius next to a tolerance circle, a second,
zoomed plot (an inset below the legend) shows the tolerance circle and those
vectors at a scale set by the tolerance, so a residual of a few per cent of the
initial unbalance is still seen against its limit.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from shopapp.balancing.phasors import to_display_deg
from shopapp.charts.labels import place
from shopapp.charts.primitives import Circle, Figure, Line, Rect, Text
from shopapp.core.display import number, quantity

VECTOR_STYLES = ("initial", "check", "residual", "trial")
_NICE = (1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0, 10.0)
_LEGEND_ROW = 13.0
_MARGIN = 22.0
# A check or residual drawn shorter than this share of the plot radius gets the zoomed inset
# (our choice: below about 10 % an arrow of a few points is hard to judge against a circle).
ZOOM_BELOW = 0.12
_ZOOM_SHARE = 0.5  # inset side as a share of the figure width
_TEXT = "label"  # 9 pt: the plot's own labels, readable at the default size
# Directions tried, in order, for the ring values (between the spokes first).
_RING_LABEL_DEG = (15.0, 45.0, 75.0, 105.0, 135.0, 165.0, 195.0, 225.0, 255.0, 285.0, 315.0,
                   345.0)


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
    plot_r = size / 2.0 - _MARGIN
    biggest = max([v.magnitude for v in usable]
                  + ([limit] if has_limit and limit is not None else []) + [0.0])
    outer = nice_ceiling(biggest)
    k = plot_r / outer
    small = [v for v in usable if v.style in ("check", "residual")
             and v.magnitude * k < ZOOM_BELOW * plot_r]
    zoom = has_limit and bool(small) and limit is not None and limit * k < 0.5 * plot_r
    zoom_h = (_ZOOM_SHARE * size + _LEGEND_ROW + 4.0) if zoom else 0.0
    height = size + legend_h + zoom_h
    fig = Figure(width=size, height=height, title=title,
                 description=f"Polar plot{' ' + title if title else ''}: unbalance vectors in "
                             f"{unit_label}, 0° at the top, angles growing clockwise"
                             + (", with a zoomed view around the tolerance" if zoom else ""))
    cx, cy = size / 2.0, zoom_h + legend_h + size / 2.0
    bounds = (0.0, zoom_h + legend_h, size, height)
    placed: list[Text] = []

    # Grid: four rings and the spokes; angle labels (display degrees) outside the outer ring.
    for i in range(1, 5):
        fig.add(Circle(cx, cy, plot_r * i / 4.0, style="grid"))
    n_spokes = max(1, round(360.0 / spoke_deg))
    for i in range(n_spokes):
        d = i * 360.0 / n_spokes
        x2, y2 = point(cx, cy, plot_r, d)
        fig.add(Line(cx, cy, x2, y2, style="grid"))
        lx, ly = point(cx, cy, plot_r + 11.0, d)
        placed.append(Text(lx, ly - 3.0, quantity(d, "°"), style=_TEXT, anchor="middle"))
    if has_limit:
        assert limit is not None
        fig.add(Circle(cx, cy, limit * k, style="limit",
                       title=f"limit {number(limit, trim=True)} {unit_label}"))

    tips: list[tuple[float, float, str]] = []
    for v in usable:
        d = to_display_deg(v.angle_deg, sense=angle_sense, zero_deg=angle_zero_deg)
        style = v.style if v.style in VECTOR_STYLES else "check"
        x2, y2 = point(cx, cy, v.magnitude * k, d)
        if v.magnitude * k < 1.0:
            fig.add(Circle(cx, cy, 2.0, style="point", title=v.label))
        else:
            fig.add(Line(cx, cy, x2, y2, style=style, arrow=True))
        tips.append((v.magnitude * k, d, _short(v.label)))
    _place_tips(placed, tips, cx, cy, bounds)
    _place_ring_values(placed, cx, cy, plot_r, outer, bounds)
    fig.add(*placed)

    # Legend: a line sample in the series' style, the label, magnitude and display angle.
    y = zoom_h + legend_h - _LEGEND_ROW
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
    if zoom:
        assert limit is not None
        _zoom_inset(fig, small, limit, size, angle_sense, angle_zero_deg, unit_label)
    return fig


def _place_tips(placed: list[Text], tips: list[tuple[float, float, str]], cx: float,
                cy: float, bounds: tuple[float, float, float, float]) -> None:
    """Tip labels beyond each arrow's tip, moved outward or sideways until clear."""
    for r, d, text in tips:
        candidates = (Text(x, y - 3.0, text, style=_TEXT, anchor="middle")
                      for off in (9.0, 16.0, 24.0)
                      for dd in (0.0, 12.0, -12.0, 24.0, -24.0)
                      for x, y in (point(cx, cy, r + off, d + dd),))
        chosen = place(candidates, placed, bounds)
        if chosen is not None:  # crowded tips keep their legend line, which always shows
            placed.append(chosen)


def _place_ring_values(placed: list[Text], cx: float, cy: float, plot_r: float,
                       outer: float, bounds: tuple[float, float, float, float]) -> None:
    """The values of the half and outer rings, just inside each ring, clear of other text."""
    for frac in (0.5, 1.0):
        text = number(outer * frac, trim=True)
        candidates = (Text(x, y - 3.0, text, style=_TEXT, anchor="middle")
                      for x, y in (point(cx, cy, plot_r * frac - 7.0, d)
                                   for d in _RING_LABEL_DEG))
        chosen = place(candidates, placed, bounds)
        if chosen is not None:  # the legend states the outer ring's value in any case
            placed.append(chosen)


def _zoom_inset(fig: Figure, small: list[PolarVector], limit: float, size: float,
                angle_sense: str, angle_zero_deg: float, unit_label: str) -> None:
    """A second plot, below the legend, scaled to the tolerance circle."""
    side = _ZOOM_SHARE * size
    x0 = (size - side) / 2.0
    y0 = 2.0
    cx, cy = x0 + side / 2.0, y0 + side / 2.0
    zoom_r = side / 2.0 - 4.0
    z_outer = nice_ceiling(max([limit] + [v.magnitude for v in small]) * 1.25)
    k = zoom_r / z_outer
    fig.add(Rect(x0, y0, side, side, style="grid"))
    for i in (1, 2):
        fig.add(Circle(cx, cy, zoom_r * i / 2.0, style="grid"))
    fig.add(Circle(cx, cy, limit * k, style="limit",
                   title=f"limit {number(limit, trim=True)} {unit_label}"))
    for v in small:
        d = to_display_deg(v.angle_deg, sense=angle_sense, zero_deg=angle_zero_deg)
        x2, y2 = point(cx, cy, v.magnitude * k, d)
        if v.magnitude * k < 1.0:
            fig.add(Circle(cx, cy, 2.0, style="point", title=v.label))
        else:
            fig.add(Line(cx, cy, x2, y2, style=v.style, arrow=True))
    fig.add(Text(x0, y0 + side + 4.0, f"zoom: outer ring {number(z_outer, trim=True)} "
                                       f"{unit_label}", style="small"))


def _short(label: str) -> str:
    """Tip label: the run number when the label names one (``run 3`` → ``3``), else initial."""
    if "run " in label:
        return label.rsplit("run ", 1)[1].rstrip(")")
    return label[:1].upper()
