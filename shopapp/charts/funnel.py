"""Funnel plot: each unit's rate against its number of jobs, inside control limits.

Geometry: the plot area spans ``[left, width − right] × [bottom, height − top]``
(figure points, y up). A unit with ``n`` jobs and rate ``r`` sits at
``x = left + n / x1 · plot_w`` and ``y = bottom + (r − y0)/(y1 − y0) · plot_h``, with
``x1`` the largest ``n`` rounded up to a 1-2-2.5-5 × 10^k step and ``[y0, y1]`` the
rates in view rounded out to whole steps (never beyond 0 and 1). The shop's rate is a
horizontal line; the limit lines join the given band vertices ``(n, limit)`` in order
of ``n`` and are cut at the plot's edges.

Readable without colour: the shop's rate is a solid line, the inner (95 %) limits a
dotted line, the outer (99.8 %) limits the thick dashed ``limit`` line; a unit inside
them is a hollow circle, a flagged unit a filled circle with its name written beside
it, and a unit too small to judge a small dashed circle. Every point may carry a link
(its jobs) and a tooltip. Plain data in, a :class:`Figure` out; the statistics are
computed by the caller (``shopapp.measures``).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

from shopapp.charts.primitives import Circle, Figure, Line, Polyline, Text
from shopapp.charts.trend import nice_step
from shopapp.core.display import number, percent

_R = 3.4
_LEGEND_ROW = 13.0
_CHAR_W = 0.55  # average glyph width / font size, for placing names beside points


@dataclass(frozen=True)
class FunnelPoint:
    """One unit: its jobs, its rate, and whether it is flagged or too small to judge."""

    label: str
    n: int
    rate: float
    flagged: bool = False
    judged: bool = True  # False: fewer jobs than the smallest unit ever flagged
    link: str | None = None
    title: str | None = None


@dataclass(frozen=True)
class FunnelBand:
    """The limits at ``n`` jobs, as rates: inner (95 %) and outer (99.8 %) pairs."""

    n: int
    low_inner: float
    high_inner: float
    low_outer: float
    high_outer: float


def _rate_range(points: Sequence[FunnelPoint], target: float,
                bands: Sequence[FunnelBand], from_n: int) -> tuple[float, float, float]:
    """``(y0, y1, step)``: the points, the target and the outer limits from ``from_n`` on."""
    seen = [p.rate for p in points] + [target]
    seen += [v for b in bands if b.n >= from_n for v in (b.low_outer, b.high_outer)]
    lo, hi = max(0.0, min(seen)), min(1.0, max(seen))
    if hi - lo < 0.05:
        lo, hi = max(0.0, lo - 0.025), min(1.0, hi + 0.025)
    step = nice_step(hi - lo, 5)
    y0 = max(0.0, math.floor(lo / step + 1e-9) * step)
    y1 = min(1.0, math.ceil(hi / step - 1e-9) * step)
    if y1 <= y0:
        y1 = min(1.0, y0 + step)
        y0 = y1 - step
    return y0, y1, step


def funnel_figure(
    points: Sequence[FunnelPoint],
    target: float,
    bands: Sequence[FunnelBand],
    *,
    title: str = "",
    x_label: str = "jobs",
    target_label: str = "shop rate",
    min_jobs: int = 5,
    y_format: Callable[[float], str] = percent,
    width: float = 340.0,
    height: float = 250.0,
    label_chars: int = 22,
) -> Figure:
    """Build the funnel plot.

    Parameters
    ----------
    points : sequence of FunnelPoint
        The units (``n ≥ 1``, rate in [0, 1]).
    target : float
        The rate the limits are drawn around (the shop's rate).
    bands : sequence of FunnelBand
        Limit vertices in order of ``n``; must include each point's ``n`` so a point
        drawn outside the outer line is exactly a flagged point.
    min_jobs : int
        Units with fewer jobs are never flagged; the y range follows the limits from
        this ``n`` on (smaller ``n`` have limits near 0 and 1).

    Returns
    -------
    Figure
    """
    if not 0.0 <= target <= 1.0 or not math.isfinite(target):
        raise ValueError(f"target {target!r} is not a rate between 0 and 1")
    for p in points:
        if p.n < 1 or not 0.0 <= p.rate <= 1.0:
            raise ValueError(f"point {p.label!r}: {p.n} jobs at rate {p.rate!r}")
    fig = Figure(width, height, title=title,
                 description=f"{title}: {len(points)} units, "
                             f"{sum(p.flagged for p in points)} outside the outer limits")
    left, right = 40.0, 12.0
    top = 22.0 if title else 10.0
    columns = 3 if width - left - right >= 360 else 2
    bottom = 42.0 + math.ceil(6 / columns) * _LEGEND_ROW
    plot_w, plot_h = width - left - right, height - top - bottom
    if title:
        fig.add(Text(left, height - 14.0, title, style="title"))
    n_max = max([p.n for p in points] + [1])
    x_step = nice_step(float(n_max), 4)
    x1 = max(x_step, math.ceil(n_max / x_step - 1e-9) * x_step)
    y0, y1, y_step = _rate_range(points, target, bands, min(
        [p.n for p in points if p.n >= min_jobs] or [n_max]))

    def xpos(n: float) -> float:
        return left + n / x1 * plot_w

    def ypos(v: float) -> float:
        return bottom + (min(max(v, y0), y1) - y0) / (y1 - y0) * plot_h

    k = 0
    while y0 + k * y_step <= y1 + y_step * 1e-6:
        tick = y0 + k * y_step
        fig.add(Line(left, ypos(tick), left + plot_w, ypos(tick), style="grid" if k else "axis"))
        fig.add(Text(left - 4.0, ypos(tick) - 3.0, y_format(tick), style="small", anchor="end"))
        k += 1
    fig.add(Line(left, bottom, left, bottom + plot_h, style="axis"))
    t = 0
    while t * x_step <= x1 * (1 + 1e-9):
        tx = xpos(t * x_step)
        fig.add(Line(tx, bottom, tx, bottom - 3.0, style="axis"))
        fig.add(Text(tx, bottom - 12.0, number(t * x_step, trim=True), style="small",
                     anchor="middle"))
        t += 1
    fig.add(Text(left + plot_w, bottom - 23.0, x_label, style="small", anchor="end"))
    fig.add(Line(left, ypos(target), left + plot_w, ypos(target), style="series"))
    ordered = sorted(bands, key=lambda b: b.n)
    for style_name, pick in (
        ("series3", lambda b: b.low_inner), ("series3", lambda b: b.high_inner),
        ("limit", lambda b: b.low_outer), ("limit", lambda b: b.high_outer),
    ):
        line = tuple((xpos(b.n), ypos(pick(b))) for b in ordered)
        if len(line) >= 2:
            fig.add(Polyline(line, style=style_name))
    for p in sorted(points, key=lambda q: (q.flagged, q.judged)):  # flagged drawn last
        px, py = xpos(p.n), ypos(p.rate)
        tip = p.title or f"{p.label}: {y_format(p.rate)} of {p.n}"
        if p.flagged:
            fig.add(Circle(px, py, _R + 1.0, style="flagged", link=p.link, title=tip))
            name = p.label if len(p.label) <= label_chars else p.label[: label_chars - 1] + "…"
            room = len(name) * 7.5 * _CHAR_W
            if px + 6.0 + room > width - 2.0:
                fig.add(Text(px - 6.0, py + 5.0, name, style="small", anchor="end"))
            else:
                fig.add(Text(px + 6.0, py + 5.0, name, style="small"))
        elif p.judged:
            fig.add(Circle(px, py, _R, style="point", link=p.link, title=tip))
        else:
            fig.add(Circle(px, py, _R - 1.0, style="unjudged", link=p.link, title=tip))
    _legend(fig, left, bottom - 38.0, plot_w, columns, target_label, min_jobs)
    return fig


def _legend(fig: Figure, left: float, y: float, plot_w: float, columns: int,
            target_label: str, min_jobs: int) -> None:
    col = plot_w / columns
    entries: list[tuple[str, str, float | None]] = [
        (target_label, "series", None), ("95 % limits", "series3", None),
        ("99.8 % limits", "limit", None), ("inside the limits", "point", _R),
        ("outside: named", "flagged", _R + 1.0),
        (f"under {min_jobs} jobs: not judged", "unjudged", _R - 1.0),
    ]
    for i, (label, style_name, r) in enumerate(entries):
        lx = left + (i % columns) * col
        ly = y - (i // columns) * _LEGEND_ROW
        if r is None:
            fig.add(Line(lx, ly + 3.0, lx + 18.0, ly + 3.0, style=style_name))
        else:
            fig.add(Circle(lx + 9.0, ly + 3.0, r, style=style_name))
        fig.add(Text(lx + 22.0, ly, label, style="small"))
