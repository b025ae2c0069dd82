"""The owner's charts, from the measures: funnel plots, control charts, the Pareto of
rework reasons and the machines' proving tests.

The dashboard (SVG) and the monthly PDF (:mod:`shopapp.reports.shop_month`) draw these
very figures; the geometry is :mod:`shopapp.charts`, the statistics
:mod:`shopapp.measures.stats` (through :mod:`shopapp.measures.signals`).
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Callable, Sequence

from shopapp.charts import Figure
from shopapp.charts.bars import Bar, BarGroup, bar_figure
from shopapp.charts.funnel import FunnelBand, FunnelPoint, funnel_figure
from shopapp.charts.pchart import PChartMonth, PChartRun, pchart_figure
from shopapp.charts.trend import TrendSeries, trend_figure
from shopapp.core.display import number, percent
from shopapp.measures.costs import ReasonCost
from shopapp.measures.drift import MachineDrift
from shopapp.measures.figures import DIMENSION_LABELS, SliceRow
from shopapp.measures.signals import UnitFunnel
from shopapp.measures.stats import PChart, funnel_limits_at

_MONTHS = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec")
RATE_TITLES = {"rework_rate": "Rework", "first_pass_rate": "First pass"}
#: Below this many jobs every n gets a vertex of the limit lines; above, about 2 % apart
#: (and always at each unit's own n, where the line must be exact).
_EVERY_N_UP_TO = 60
_CURVE_GROWTH = 1.02

Link = Callable[[SliceRow, str], str | None]


def month_label(key: str | dt.date) -> str:
    """``'2026-10'`` → ``'Oct 26'`` (axis text)."""
    text = key.isoformat() if isinstance(key, dt.date) else str(key)
    year, month = text[:4], int(text[5:7])
    return f"{_MONTHS[month - 1]} {year[2:]}"


def _vertices(n_max: int, unit_ns: Sequence[int]) -> list[int]:
    ns = set(range(1, min(n_max, _EVERY_N_UP_TO) + 1)) | set(unit_ns) | {n_max}
    n = float(_EVERY_N_UP_TO)
    while n < n_max:
        n *= _CURVE_GROWTH
        ns.add(min(n_max, math.ceil(n)))
    return sorted(ns)


def funnel_bands(target: float, n_max: int, unit_ns: Sequence[int]) -> list[FunnelBand]:
    """Limit-line vertices: exact binomial limits (:func:`funnel_limits_at`) at the
    chosen n, all in one call."""
    limits = funnel_limits_at(target, _vertices(n_max, unit_ns))
    return [FunnelBand(lim.n, *lim.limits_95, *lim.limits_99_8) for lim in limits]


def funnel_chart(
    uf: UnitFunnel,
    *,
    link: Link | None = None,
    width: float = 340.0,
    height: float = 250.0,
) -> Figure:
    """The funnel plot of one rate by one dimension; each point opens the unit's jobs."""
    title = f"{RATE_TITLES[uf.rate]} by {DIMENSION_LABELS[uf.dimension]}"
    f = uf.funnel
    if f.target is None:
        return Figure(width, 40.0, title=title)
    what = "rework" if uf.rate == "rework_rate" else "reached_in_tolerance"
    points = []
    for u in f.units:
        if u.rate.denominator == 0 or u.rate.value is None:
            continue
        row = uf.rows[str(u.key)]
        interval = u.rate.interval_95
        ci = f" (95 % interval {percent(interval[0])}–{percent(interval[1])})" if interval else ""
        points.append(FunnelPoint(
            row.label, u.rate.denominator, u.rate.value, flagged=u.flag is not None,
            judged=u.rate.denominator >= f.min_jobs,
            link=link(row, what) if link else None,
            title=f"{u.sentence}: {percent(u.rate.value)}{ci}",
        ))
    n_max = max((p.n for p in points), default=1)
    bands = funnel_bands(f.target, n_max, [p.n for p in points])
    x_label = ("jobs that reached tolerance" if uf.rate == "rework_rate"
               else "jobs judged for first pass")
    return funnel_figure(points, f.target, bands, title=title, min_jobs=f.min_jobs,
                         x_label=x_label, target_label=f"shop {percent(f.target)}",
                         width=width, height=height)


def pchart_chart(
    chart: PChart,
    rows: Sequence[SliceRow],
    rate: str,
    *,
    link: Link | None = None,
    width: float = 520.0,
    height: float = 250.0,
) -> Figure:
    """The monthly control chart of ``rate``; each point opens the month's jobs."""
    what = "rework" if rate == "rework_rate" else "reached_in_tolerance"
    months = []
    for point, row in zip(chart.points, rows, strict=True):
        r = point.rate
        tip = None
        if r.value is not None:
            tip = (f"{month_label(point.label)}: {r.numerator} of {r.denominator} "
                   f"({percent(r.value)}), limits {percent(point.lcl)}–{percent(point.ucl)}")
        months.append(PChartMonth(point.label, r.value, point.lcl, point.ucl, point.outside,
                                  point.in_run, link(row, what) if link and r.value is not None
                                  else None, tip))
    runs = [PChartRun(run.first, run.last, run.side) for run in chart.runs]
    centre_text = percent(chart.centre) if chart.centre is not None else "–"
    return pchart_figure(months, chart.centre, runs=runs,
                         title=f"{RATE_TITLES[rate]} rate by month (p-chart)",
                         centre_label=f"centre: {centre_text}", x_format=month_label,
                         width=width, height=height, max_x_labels=12 if width >= 450 else 6)


def pareto_chart(reasons: Sequence[ReasonCost], *, limit: int = 8, width: float = 560.0,
                 bar_h: float = 11.0) -> Figure:
    """Rework machine hours by reason, largest first, with the running share (a Pareto
    chart laid on its side: the bars in falling order, the running share written at each)."""
    shown = [r for r in reasons if r.seconds > 0][:limit]
    largest = max((r.hours for r in shown), default=1.0)
    groups = [
        BarGroup(r.reason, [Bar(r.hours, text=(
            f"{number(r.hours, trim=True)} h · {r.reworks}× · cum. "
            f"{percent((r.cumulative_percent or 0) / 100)}"))])
        for r in shown
    ]
    return bar_figure(groups, series=["rework machine hours · times · running share"],
                      title="Why rework happened: machine hours by reason",
                      x_max=largest * 2.0, value_format=lambda v: number(v, trim=True),
                      width=width, bar_h=bar_h, label_chars=38, styles=("bar_bad",))


def machine_chart(md: MachineDrift, *, width: float = 340.0, height: float = 220.0) -> Figure:
    """One machine's proving-test U_mar over time against its claim."""
    dates = [t.performed_on for t in md.tests]
    name = md.name if len(md.name) <= 34 else md.name[:33] + "…"
    return trend_figure(
        dates, [TrendSeries("U_mar, g·mm", [t.umar_gmm for t in md.tests])],
        title=name, limit=md.claim_gmm,
        limit_label="claim", y_min=0.0, width=width, height=height,
        x_format=lambda d: d.isoformat() if isinstance(d, dt.date) else str(d),
        max_x_labels=4,
    )
