"""The monthly report of the shop measures: the data of
:mod:`shopapp.reports.shop_month` from a :class:`~shopapp.measures.services.ShopReport`."""

from __future__ import annotations

import datetime as dt

from shopapp.measures.charts import funnel_chart, pchart_chart
from shopapp.measures.definitions import DEFINITIONS
from shopapp.measures.services import ShopReport
from shopapp.measures.signals import COMPARISON_RULE
from shopapp.measures.stats import CAUTION
from shopapp.measures.texts import cost_summary, drift_lines, headline_rows, reason_lines
from shopapp.reports import shop_month
from shopapp.reports.shop_month import ShopMonth

HALF = 250.0  # points: a chart in half the page's width, drawn at scale 1
#: The definitions printed on paper (the comparison rule and the caution are printed
#: beside the figures they concern).
RATE_DEFINITIONS = ("first_pass_rate", "rework_rate", "promised_hit_rate", "rejection_rate",
                    "interval_95")
METHOD_DEFINITIONS = ("period", "funnel", "control_chart", "machine_time", "drift")


def month_data(report: ShopReport) -> ShopMonth:
    """What the monthly PDF prints, taken from ``report``."""
    p, prev = report.period, report.previous_period
    funnels = [funnel_chart(report.funnels["rework_rate"][dim], width=HALF, height=170)
               for dim in ("rotor_type", "operator")
               if dim in report.funnels.get("rework_rate", {})]
    charts = [pchart_chart(report.control_charts[name], report.trend, name, width=HALF,
                           height=165)
              for name in ("first_pass_rate", "rework_rate") if name in report.control_charts]
    cost = report.cost
    return ShopMonth(
        shop_name=report.shop_name,
        period_label=report.period_label,
        start=p.start,
        end=min(p.end, report.as_of),
        previous_label=report.previous_label,
        previous_start=prev.start,
        previous_end=prev.end,
        as_of=report.as_of,
        headline=headline_rows(report.figures, report.previous, report.changes),
        control_charts=charts,
        funnels=funnels,
        rejection_reasons=report.rejection_reasons,
        machines=report.machines,
        comparison_note=report.comparison_note,
        comparison_rule=COMPARISON_RULE,
        flags=[f["sentence"] for f in report.funnel_flags()],
        caution=CAUTION,
        cost_summary=cost_summary(cost, report.period_label) if cost is not None else "",
        cost_reasons=reason_lines(cost) if cost is not None else (),
        drift=drift_lines(report.drift, report.rotors_getting_worse),
        rate_definitions=[DEFINITIONS[k] for k in RATE_DEFINITIONS],
        definitions=[DEFINITIONS[k] for k in METHOD_DEFINITIONS],
    )


def render(report: ShopReport, *, created: dt.datetime | None = None) -> bytes:
    """The two-page monthly report of ``report`` as PDF bytes."""
    return shop_month.render(month_data(report), created=created)
