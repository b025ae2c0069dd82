"""Control chart for a share (p-chart) over months, as a :class:`Figure`.

Geometry: months are equally spaced slots across ``[left, width − right]``; month
``i`` has its centre at ``x = left + (i + 0.5)·slot``. A rate ``v`` sits at
``y = bottom + (v − y0)/(y1 − y0)·plot_h`` with ``y0 = 0`` and ``y1`` the largest
rate or upper limit rounded up to a 1-2-2.5-5 × 10^k step (at most 1). The centre
line is horizontal; each month's limits are a horizontal step across its own slot
(the limits differ with the month's number of jobs), joined into one stepped line
while months follow each other with jobs.

Readable without colour: centre solid, limits thick dashed (``limit``), the months
joined by a thin dotted line; a month inside the limits is a hollow circle, a month
outside them a filled circle with "above" or "below" written over it, a month in a
run on one side of the centre line a grey-filled square, and each run is underlined
by a bar with its length. A month without jobs has no point and breaks the lines.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

from shopapp.charts.primitives import Circle, Figure, Line, Polyline, Rect, Text
from shopapp.charts.trend import nice_step
from shopapp.core.display import percent

_R = 3.4
_LEGEND_ROW = 13.0


@dataclass(frozen=True)
class PChartMonth:
    """One month: its rate and limits (None without jobs), and how it is marked."""

    label: str
    rate: float | None
    lcl: float | None
    ucl: float | None
    outside: str | None = None  # "above" | "below"
    in_run: bool = False
    link: str | None = None
    title: str | None = None


@dataclass(frozen=True)
class PChartRun:
    """A run of months on one side of the centre line: first and last index, side."""

    first: int
    last: int
    side: str


def pchart_figure(
    months: Sequence[PChartMonth],
    centre: float | None,
    *,
    runs: Sequence[PChartRun] = (),
    title: str = "",
    centre_label: str = "rate of the months shown",
    x_format: Callable[[str], str] = str,
    y_format: Callable[[float], str] = percent,
    width: float = 520.0,
    height: float = 250.0,
    max_x_labels: int = 12,
) -> Figure:
    """Build the p-chart (see the module docstring for the geometry and the marks)."""
    for m in months:
        for v in (m.rate, m.lcl, m.ucl):
            if v is not None and not (math.isfinite(v) and 0.0 <= v <= 1.0):
                raise ValueError(f"month {m.label!r}: {v!r} is not a rate between 0 and 1")
    fig = Figure(width, height, title=title,
                 description=f"{title}: {len(months)} months, "
                             f"{sum(m.outside is not None for m in months)} outside the limits, "
                             f"{len(runs)} runs")
    left, right = 40.0, 12.0
    top = 22.0 if title else 10.0
    columns = _legend_columns(width - left - right)
    bottom = 30.0 + math.ceil(6 / columns) * _LEGEND_ROW
    plot_w, plot_h = width - left - right, height - top - bottom
    if title:
        fig.add(Text(left, height - 14.0, title, style="title"))
    seen = [v for m in months for v in (m.rate, m.ucl) if v is not None]
    if centre is not None:
        seen.append(centre)
    hi = max([*seen, 0.05])
    step = nice_step(hi, 5)
    y1 = min(1.0, math.ceil(hi / step - 1e-9) * step)
    if y1 <= 0:
        y1 = 1.0

    def ypos(v: float) -> float:
        return bottom + min(v, y1) / y1 * plot_h

    k = 0
    while k * step <= y1 + step * 1e-6:
        fig.add(Line(left, ypos(k * step), left + plot_w, ypos(k * step),
                     style="grid" if k else "axis"))
        fig.add(Text(left - 4.0, ypos(k * step) - 3.0, y_format(k * step), style="small",
                     anchor="end"))
        k += 1
    fig.add(Line(left, bottom, left, bottom + plot_h, style="axis"))
    slot = plot_w / max(1, len(months))
    xs = [left + (i + 0.5) * slot for i in range(len(months))]
    every = max(1, math.ceil(len(months) / max(1, max_x_labels)))
    for i, (m, px) in enumerate(zip(months, xs, strict=True)):
        fig.add(Line(px, bottom, px, bottom - 3.0, style="axis"))
        if i % every == 0:
            fig.add(Text(px, bottom - 13.0, x_format(m.label), style="small", anchor="middle"))
    if centre is not None:
        fig.add(Line(left, ypos(centre), left + plot_w, ypos(centre), style="series"))
    for pick in (lambda m: m.ucl, lambda m: m.lcl):
        step_line: list[tuple[float, float]] = []
        for m, px in zip(months, xs, strict=True):
            v = pick(m)
            if v is None:
                if len(step_line) >= 2:
                    fig.add(Polyline(tuple(step_line), style="limit"))
                step_line = []
                continue
            step_line += [(px - slot / 2, ypos(v)), (px + slot / 2, ypos(v))]
        if len(step_line) >= 2:
            fig.add(Polyline(tuple(step_line), style="limit"))
    joined: list[tuple[float, float]] = []
    for m, px in zip(months, xs, strict=True):
        if m.rate is None:
            if len(joined) >= 2:
                fig.add(Polyline(tuple(joined), style="series3"))
            joined = []
        else:
            joined.append((px, ypos(m.rate)))
    if len(joined) >= 2:
        fig.add(Polyline(tuple(joined), style="series3"))
    for run in runs:
        x_a, x_b = xs[run.first] - slot * 0.4, xs[run.last] + slot * 0.4
        fig.add(Line(x_a, bottom + 4.0, x_b, bottom + 4.0, style="residual"))
        fig.add(Text((x_a + x_b) / 2, bottom + 7.0,
                     f"{run.last - run.first + 1} in a row {run.side}", style="small",
                     anchor="middle"))
    for m, px in zip(months, xs, strict=True):
        if m.rate is None:
            continue
        py = ypos(m.rate)
        tip = m.title or f"{x_format(m.label)}: {y_format(m.rate)}"
        if m.outside is not None:
            fig.add(Circle(px, py, _R + 1.0, style="flagged", link=m.link, title=tip))
            fig.add(Text(px, py + 7.0, m.outside, style="small", anchor="middle"))
        elif m.in_run:
            fig.add(Rect(px - _R, py - _R, 2 * _R, 2 * _R, style="in_run", link=m.link,
                         title=tip))
        else:
            fig.add(Circle(px, py, _R, style="point", link=m.link, title=tip))
    _legend(fig, left, bottom - 28.0, plot_w, columns, centre_label)
    return fig


def _legend_columns(plot_w: float) -> int:
    """Three legend entries to a row on a wide chart, two on a narrow one."""
    return 3 if plot_w >= 360 else 2


def _legend(fig: Figure, left: float, y: float, plot_w: float, columns: int,
            centre_label: str) -> None:
    col = plot_w / columns
    entries = [(centre_label, "series"), ("limits (3 standard errors)", "limit"),
               ("the months, joined", "series3"), ("inside the limits", "point"),
               ("outside the limits", "flagged"), ("in a run on one side", "in_run")]
    for i, (label, style_name) in enumerate(entries):
        lx = left + (i % columns) * col
        ly = y - (i // columns) * _LEGEND_ROW
        if style_name == "point":
            fig.add(Circle(lx + 9.0, ly + 3.0, _R, style="point"))
        elif style_name == "flagged":
            fig.add(Circle(lx + 9.0, ly + 3.0, _R + 1.0, style="flagged"))
        elif style_name == "in_run":
            fig.add(Rect(lx + 9.0 - _R, ly + 3.0 - _R, 2 * _R, 2 * _R, style="in_run"))
        else:
            fig.add(Line(lx, ly + 3.0, lx + 18.0, ly + 3.0, style=style_name))
        fig.add(Text(lx + 22.0, ly, label, style="small"))
