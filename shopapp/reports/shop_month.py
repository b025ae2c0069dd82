"""The monthly shop report: a two-page PDF an owner prints, from a ShopReport.

Page 1: the month's headline figures against the previous month and the
twelve-month trend of first-pass and rework rate. Page 2: where the rework comes
from (rotor types and operators), rework and rejection reasons, rotors getting
worse and the machines' use and verification status. Long lists are cut to
their first rows (the dashboard and its CSV files have them all) so the report
stays on two pages.

Also home of the chart builders the dashboard uses (``trend_chart``,
``rework_bars``), so the page and the paper draw the very same figures.
Imports no Flask or SQLAlchemy: it reads the report's attributes only.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING, Any

from reportlab.lib.units import mm
from reportlab.platypus import PageBreak, Paragraph, Spacer, Table, TableStyle

from shopapp.charts import Figure
from shopapp.charts.bars import Bar, BarGroup, bar_figure
from shopapp.charts.trend import TrendSeries, percent, trend_figure
from shopapp.reports.common import (
    DocumentMeta,
    build_pdf,
    esc,
    fmt_date,
    grid_table,
    keep,
    styles,
)
from shopapp.reports.drawing import to_drawing

if TYPE_CHECKING:  # typing only: reports never import the services at run time
    from shopapp.measures.services import Figures, ShopReport, SliceRow

LIST_ROWS = 6  # rows of each list on paper
BAR_ROWS = 8  # categories per bar chart on paper
_MONTHS = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec")


# --------------------------------------------------------------------------- formatting
def fmt_rate(value: float | None) -> str:
    """A rate 0..1 as a whole percentage; an en dash when there is nothing to divide."""
    return "–" if value is None else f"{value * 100:.0f} %"


def fmt_days(value: float | None) -> str:
    return "–" if value is None else f"{value:.1f}"


def fmt_mean(value: float | None) -> str:
    return "–" if value is None else f"{value:.2f}"


def month_label(key: str | dt.date) -> str:
    """``'2026-10'`` → ``'Oct 26'`` (axis text)."""
    text = key.isoformat() if isinstance(key, dt.date) else str(key)
    year, month = text[:4], int(text[5:7])
    return f"{_MONTHS[month - 1]} {year[2:]}"


# (measure name, label, formatter, higher is better?)
HEADLINE_ROWS: tuple[tuple[str, str, Callable[[Any], str], bool | None], ...] = (
    ("jobs_received", "Jobs received", str, None),
    ("jobs_dispatched", "Jobs dispatched", str, None),
    ("wip_jobs", "Work in progress at the end", str, None),
    ("wip_age_median_wd", "  its median age, working days", fmt_days, False),
    ("wip_age_max_wd", "  oldest, working days", lambda v: "–" if v is None else str(v), False),
    ("turnaround_median_wd", "Turnaround, median working days", fmt_days, False),
    ("turnaround_p90_wd", "Turnaround, 90th percentile", fmt_days, False),
    ("promised_hit_rate", "Dispatched by the promised date", fmt_rate, True),
    ("reached_in_tolerance", "Jobs that reached tolerance", str, None),
    ("first_pass_rate", "First-pass rate", fmt_rate, True),
    ("correction_cycles_mean", "Mean correction cycles", fmt_mean, False),
    ("reworked_jobs", "Reworked jobs (reopened + returns)", str, False),
    ("rework_rate", "Rework rate", fmt_rate, False),
    ("rejected_jobs", "Rejected jobs", str, False),
)


def change_text(now: float | None, before: float | None, better_up: bool | None,
                *, rate: bool = False) -> str:
    """'up 3 (worse)', 'down 5 points (better)', 'same' — words, so no colour is needed."""
    if now is None or before is None:
        return ""
    delta = (now - before) * (100 if rate else 1)
    if abs(delta) < 1e-9:
        return "same"
    unit = " points" if rate else ""
    word = "up" if delta > 0 else "down"
    size = f"{abs(delta):.0f}" if rate or float(delta).is_integer() else f"{abs(delta):.1f}"
    verdict = ""
    if better_up is not None:
        verdict = " (better)" if (delta > 0) == better_up else " (worse)"
    return f"{word} {size}{unit}{verdict}"


def headline_rows(now: Figures, before: Figures) -> list[tuple[str, str, str, str, str]]:
    """(measure, label, this period, previous period, change) for the headline table."""
    a, b = now.as_dict(), before.as_dict()
    out = []
    for name, label, fmt, better_up in HEADLINE_ROWS:
        rate = name.endswith("_rate")
        out.append((name, label, fmt(a[name]), fmt(b[name]),
                    change_text(a[name], b[name], better_up, rate=rate)))
    return out


# --------------------------------------------------------------------------- charts
def trend_chart(
    rows: Sequence[SliceRow],
    *,
    link: Callable[[SliceRow, str], str | None] | None = None,
    width: float = 520.0,
    height: float = 230.0,
    title: str = "First-pass rate and rework rate by month",
) -> Figure:
    """Monthly first-pass and rework rates (0–100 %); ``link(row, measure)`` per point."""
    keys = [r.key or "" for r in rows]
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
                text=f"{r.figures.reworked_jobs} ({fmt_rate(r.figures.rework_rate)})"),
        ])
        for r in ranked
    ]
    return bar_figure(groups, series=["reached tolerance", "reworked (rate)"],
                      title=f"Rework by {by_label}", width=width, bar_h=bar_h,
                      value_format=lambda v: f"{v:g}")


# --------------------------------------------------------------------------- the PDF
def _side_by_side(left: Any, right: Any, width: float) -> Table:
    t = Table([[left, right]], colWidths=[width / 2, width / 2])
    t.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"),
                           ("LEFTPADDING", (0, 0), (-1, -1), 0),
                           ("RIGHTPADDING", (0, 0), (-1, -1), 4)]))
    return t


def _fit(fig: Figure, width: float) -> Any:
    return to_drawing(fig, scale=min(1.0, width / fig.width))


def render(report: ShopReport, *, created: dt.datetime | None = None) -> bytes:
    """The two-page monthly report as PDF bytes (deterministic for a given ``created``)."""
    st = styles()
    created = created or dt.datetime.combine(report.as_of, dt.time(0), tzinfo=dt.UTC)
    width = 174 * mm  # A4 less the margins of shopapp.reports.common
    p = report.period
    shop = report.shop_name or "Balancing shop"
    story: list[Any] = [
        Paragraph(esc(f"{shop} — shop report, {p.label}"), st.title),
        Paragraph(esc(f"{fmt_date(p.start)} to {fmt_date(p.end)}, against "
                      f"{fmt_date(report.previous_period.start)} to "
                      f"{fmt_date(report.previous_period.end)}. Working days are Monday to "
                      "Friday; definitions as in the shop's README."), st.subtitle),
    ]
    head = [["Measure", p.label, report.previous_period.label, "Change"]]
    head += [[label.strip(), now, before, change]
             for _, label, now, before, change in headline_rows(report.figures, report.previous)]
    story.append(keep(Paragraph("The month in figures", st.heading),
                      grid_table(head, [70 * mm, 28 * mm, 28 * mm, 48 * mm],
                                 align_right_from=1)))
    story.append(Spacer(1, 4 * mm))
    story.append(keep(Paragraph("Is it getting better?", st.heading),
                      _fit(trend_chart(report.trend, width=520, height=230), width)))
    story.append(Paragraph(esc(
        "First-pass rate: share of the jobs that reached tolerance in the month whose first "
        "check after the first correction was within tolerance in every plane. Rework rate: "
        "jobs reopened plus return jobs received in the month, per job that reached "
        "tolerance in it."), st.small))
    story.append(PageBreak())

    half = width / 2 - 4
    bars_rt = rework_bars(report.slices.get("rotor_type", []), by_label="rotor type",
                          limit=BAR_ROWS, width=260, bar_h=7)
    bars_op = rework_bars(report.slices.get("operator", []), by_label="operator",
                          limit=BAR_ROWS, width=260, bar_h=7)
    story.append(Paragraph("Where the rework comes from", st.heading))
    story.append(_side_by_side(_fit(bars_rt, half), _fit(bars_op, half), width))

    def reasons(title: str, items: Sequence[Any]) -> list[Any]:
        rows = [["Reason", "Jobs"]] + [[r.reason, str(r.count)] for r in items[:LIST_ROWS]]
        if not items:
            rows.append(["none in this period", ""])
        return [Paragraph(title, st.heading),
                grid_table(rows, [half - 16 * mm, 14 * mm], align_right_from=1)]

    rw = reasons("Rework reasons", report.rework_reasons)
    rj = reasons("Rejection reasons", report.rejection_reasons)
    story.append(_side_by_side(rw, rj, width))

    worse = [["Serial", "Customer", "Rotor type", "Latest job", "Initial unbalance, oldest first"]]
    for w in report.rotors_getting_worse[:LIST_ROWS]:
        worse.append([w.serial_number, w.customer, w.rotor_type, w.job_number,
                      " → ".join(f"{a:.3g}" for a in w.initial_amplitudes) + f" {w.unit}"])
    if len(worse) == 1:
        worse.append(["none this period", "", "", "", ""])
    story.append(keep(Paragraph("Rotors getting worse", st.heading),
                      grid_table(worse, [24 * mm, 38 * mm, 28 * mm, 26 * mm, 58 * mm])))

    machines = [["Machine", "Jobs", "Runs", "Last verified", "Due", "Status"]]
    for m in report.machines[: LIST_ROWS + 2]:
        machines.append([m.name, str(m.jobs), str(m.runs), fmt_date(m.last_verified_on),
                         fmt_date(m.due_on), m.status])
    story.append(keep(Paragraph("Machines: use this month and verification today", st.heading),
                      grid_table(machines, [46 * mm, 16 * mm, 16 * mm, 28 * mm, 28 * mm,
                                            40 * mm], align_right_from=1)))
    cut = [name for name, items, n in (
        ("rework reasons", report.rework_reasons, LIST_ROWS),
        ("rejection reasons", report.rejection_reasons, LIST_ROWS),
        ("rotors getting worse", report.rotors_getting_worse, LIST_ROWS),
        ("machines", report.machines, LIST_ROWS + 2),
    ) if len(items) > n]
    if cut:
        story.append(Paragraph(esc("Lists cut to their first rows: " + ", ".join(cut)
                                   + ". The dashboard and its CSV files have them all."),
                               st.small))
    meta = DocumentMeta(
        title=f"Shop report {p.label}",
        created=created,
        id_seed=f"shop-month {p.start.isoformat()} {report.as_of.isoformat()}",
        author=shop,
        subject="Monthly shop measures",
        header_left=f"{shop} · shop report",
        header_right=p.label,
        footer_left=f"figures as of {fmt_date(report.as_of)}",
    )
    return build_pdf(story, meta)
