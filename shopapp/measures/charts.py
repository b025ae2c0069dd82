"""The dashboard's charts, from the measures: the monthly trend and the rework bars.

The dashboard (SVG) and the monthly PDF (:mod:`shopapp.reports.shop_month`) draw
these very figures; the geometry is :mod:`shopapp.charts`.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable, Sequence

from shopapp.charts import Figure
from shopapp.charts.bars import Bar, BarGroup, bar_figure
from shopapp.charts.trend import TrendSeries, trend_figure
from shopapp.core.display import percent
from shopapp.measures.figures import SliceRow

_MONTHS = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec")


def month_label(key: str | dt.date) -> str:
    """``'2026-10'`` → ``'Oct 26'`` (axis text)."""
    text = key.isoformat() if isinstance(key, dt.date) else str(key)
    year, month = text[:4], int(text[5:7])
    return f"{_MONTHS[month - 1]} {year[2:]}"


def trend_chart(
    rows: Sequence[SliceRow],
    *,
    link: Callable[[SliceRow, str], str | None] | None = None,
    width: float = 520.0,
    height: float = 230.0,
    title: str = "First-pass rate and rework rate by month",
) -> Figure:
    """Monthly first-pass and rework rates (0–100 %); ``link(row, measure)`` per point."""
    keys: list[str | dt.date] = [r.key or "" for r in rows]
    fp = [r.figures.first_pass_rate for r in rows]
    rw = [r.figures.rework_rate for r in rows]
    links_fp = [link(r, "first_pass") for r in rows] if link else None
    links_rw = [link(r, "rework") for r in rows] if link else None
    return trend_figure(
        keys,
        [TrendSeries("first-pass rate", fp, style="series", marker="circle", links=links_fp),
         TrendSeries("rework rate", rw, style="series2", marker="square", links=links_rw)],
        title=title, y_min=0.0, y_max=1.0, y_format=percent, x_format=month_label,
        width=width, height=height,
    )


def rework_bars(
    rows: Sequence[SliceRow],
    *,
    by_label: str,
    link: Callable[[SliceRow, str], str | None] | None = None,
    limit: int | None = 12,
    width: float = 520.0,
    bar_h: float = 10.0,
) -> Figure:
    """Jobs that reached tolerance and reworked jobs per category, most rework first."""
    ranked = sorted(rows, key=lambda r: (-r.figures.reworked_jobs,
                                         -r.figures.reached_in_tolerance, r.label.lower()))
    ranked = [r for r in ranked if r.figures.reached_in_tolerance or r.figures.reworked_jobs]
    if limit is not None:
        ranked = ranked[:limit]
    groups = [
        BarGroup(r.label, [
            Bar(float(r.figures.reached_in_tolerance),
                link=link(r, "reached") if link else None),
            Bar(float(r.figures.reworked_jobs), link=link(r, "rework") if link else None,
                text=f"{r.figures.reworked_jobs} ({percent(r.figures.rework_rate)})"),
        ])
        for r in ranked
    ]
    return bar_figure(groups, series=["reached tolerance", "reworked (rate)"],
                      title=f"Rework by {by_label}", width=width, bar_h=bar_h)
