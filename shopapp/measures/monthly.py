"""The monthly report of the shop measures: the data of
:mod:`shopapp.reports.shop_month` from a :class:`~shopapp.measures.services.ShopReport`."""

from __future__ import annotations

import datetime as dt

from shopapp.measures.charts import rework_bars, trend_chart
from shopapp.measures.services import ShopReport
from shopapp.measures.texts import headline_rows
from shopapp.reports import shop_month
from shopapp.reports.shop_month import ShopMonth

BAR_ROWS = 8  # categories per bar chart on paper


def month_data(report: ShopReport) -> ShopMonth:
    """What the monthly PDF prints, taken from ``report``."""
    p, prev = report.period, report.previous_period
    return ShopMonth(
        shop_name=report.shop_name,
        period_label=p.label,
        start=p.start,
        end=p.end,
        previous_label=prev.label,
        previous_start=prev.start,
        previous_end=prev.end,
        as_of=report.as_of,
        headline=headline_rows(report.figures, report.previous),
        trend=trend_chart(report.trend, width=520, height=230),
        rework_by_rotor_type=rework_bars(report.slices.get("rotor_type", []),
                                         by_label="rotor type", limit=BAR_ROWS, width=260,
                                         bar_h=7),
        rework_by_operator=rework_bars(report.slices.get("operator", []), by_label="operator",
                                       limit=BAR_ROWS, width=260, bar_h=7),
        rework_reasons=report.rework_reasons,
        rejection_reasons=report.rejection_reasons,
        rotors_getting_worse=report.rotors_getting_worse,
        machines=report.machines,
    )


def render(report: ShopReport, *, created: dt.datetime | None = None) -> bytes:
    """The two-page monthly report of ``report`` as PDF bytes."""
    return shop_month.render(month_data(report), created=created)
