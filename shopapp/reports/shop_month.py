"""The monthly shop report: a two-page PDF an owner prints, from a :class:`ShopMonth`.

Page 1: the month's headline figures against the previous month (or, for a month
in progress, the same days of it), every rate with its 95 % interval and a change
called better or worse only when a test says it is more than chance, and the
twelve-month control charts (p-charts) of first-pass and rework rate. Page 2: the
funnel plots of rework by rotor type and by operator with the units outside the
limits named (and the caution that a flag is a question, not a verdict), what
rework cost in machine hours and why, rejection reasons, what drifts the wrong way,
the machines, and the definitions. Long lists are cut to their first rows (the
dashboard and its CSV files have them all) so the report stays on two pages.

Plain data in, PDF bytes out: the shop measures (:mod:`shopapp.measures`) fill a
:class:`ShopMonth`, headline texts and chart figures included, so the page and
the paper print the very same words and draw the very same charts.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, NamedTuple

from reportlab.lib.units import mm
from reportlab.platypus import PageBreak, Paragraph, Table, TableStyle

from shopapp.charts import Figure
from shopapp.core.display import date
from shopapp.reports.common import DocumentMeta, build_pdf, esc, grid_table, keep, styles
from shopapp.reports.drawing import FigureFlowable

LIST_ROWS = 6  # rows of each list on paper
FLAG_ROWS = 6  # flagged units named on paper
DRIFT_ROWS = 3  # drift sentences on paper
REASON_ROWS = 5  # reasons behind rework on paper
REASON_CHARS = 90
DRIFT_CHARS = 230


def _clip(text: str, chars: int) -> str:
    return text if len(text) <= chars else text[: chars - 1] + "…"


@dataclass(frozen=True)
class ReasonCount:
    reason: str
    count: int


@dataclass(frozen=True)
class WorseningRotor:
    rotor_id: int
    serial_number: str
    customer: str
    rotor_type: str
    job_number: str
    received_on: dt.date
    unit: str
    # Initial unbalance of the compared visits, oldest first.
    initial_amplitudes: tuple[float, ...]


@dataclass(frozen=True)
class MachineStatus:
    machine_id: int
    name: str
    jobs: int
    runs: int
    last_verified_on: dt.date | None
    due_on: dt.date | None
    status: str  # current | due soon | overdue | failed | never verified


class HeadlineRow(NamedTuple):
    """One line of the headline table, as printed: the measure, its label, both periods'
    figures, the change in words and, for rates, both periods' 95 % intervals."""

    name: str
    label: str
    now: str
    before: str
    change: str
    now_interval: str = ""
    before_interval: str = ""


@dataclass(frozen=True)
class ReasonLine:
    """One reason behind rework, as printed: reworks, machine hours, running share."""

    reason: str
    reworks: str
    hours: str
    cumulative: str


@dataclass(frozen=True)
class ShopMonth:
    """Everything the monthly report prints (texts already worded, charts already built)."""

    shop_name: str
    period_label: str
    start: dt.date
    end: dt.date
    previous_label: str
    previous_start: dt.date
    previous_end: dt.date
    as_of: dt.date
    headline: Sequence[HeadlineRow]
    control_charts: Sequence[Figure]
    funnels: Sequence[Figure]
    rejection_reasons: Sequence[ReasonCount]
    machines: Sequence[MachineStatus]
    comparison_note: str = ""  # how the periods are compared (month to date, ...)
    comparison_rule: str = ""
    flags: Sequence[str] = ()  # units outside the funnel limits, in plain words
    caution: str = ""
    cost_summary: str = ""
    cost_reasons: Sequence[ReasonLine] = ()
    drift: Sequence[str] = ()  # rotors and machines drifting the wrong way, in plain words
    rate_definitions: Sequence[str] = ()  # the rates' definitions, under the figures
    definitions: Sequence[str] = ()  # how the charts and the cost are made, at the end


def _side_by_side(left: Any, right: Any, width: float) -> Table:
    t = Table([[left, right]], colWidths=[width / 2, width / 2])
    t.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"),
                           ("LEFTPADDING", (0, 0), (-1, -1), 0),
                           ("RIGHTPADDING", (0, 0), (-1, -1), 4)]))
    return t


def _fit(fig: Figure, width: float) -> Any:
    return FigureFlowable(fig, scale=min(1.0, width / fig.width))


def render(data: ShopMonth, *, created: dt.datetime | None = None) -> bytes:
    """The two-page monthly report as PDF bytes (deterministic for a given ``created``)."""
    st = styles()
    created = created or dt.datetime.combine(data.as_of, dt.time(0), tzinfo=dt.UTC)
    width = 174 * mm  # A4 less the margins of shopapp.reports.common
    half = width / 2 - 4
    label = data.period_label
    shop = data.shop_name or "Balancing shop"
    story: list[Any] = [
        Paragraph(esc(f"{shop} — shop report, {label}"), st.title),
        Paragraph(esc(f"{date(data.start)} to {date(data.end)}, against "
                      f"{date(data.previous_start)} to {date(data.previous_end)}. "
                      + (data.comparison_note + " " if data.comparison_note else "")
                      + "Working days are Monday to Friday."),
                  st.subtitle),
    ]
    head = [["Measure", label, "95 %", data.previous_label, "95 %", "Change"]]
    head += [[row.label.strip(), row.now, row.now_interval, row.before, row.before_interval,
              row.change] for row in data.headline]
    story.append(keep(Paragraph("The month in figures", st.heading),
                      grid_table(head, [50 * mm, 17 * mm, 16 * mm, 17 * mm, 16 * mm, 58 * mm],
                                 align_right_from=1)))
    if data.comparison_rule:
        story.append(Paragraph(esc(data.comparison_rule), st.small))
    if data.rate_definitions:
        story.append(Paragraph(esc(" ".join(data.rate_definitions)), st.small))
    if data.control_charts:
        charts = [_fit(f, half) for f in data.control_charts[:2]]
        story.append(keep(Paragraph("Is it getting better? Control charts by month", st.heading),
                          _side_by_side(charts[0], charts[-1] if len(charts) > 1 else "",
                                        width)))
    story.append(PageBreak())

    story.append(Paragraph("Beyond chance? Rework by rotor type and by operator", st.heading))
    if data.funnels:
        figs = [_fit(f, half) for f in data.funnels[:2]]
        story.append(_side_by_side(figs[0], figs[-1] if len(figs) > 1 else "", width))
    flags = list(data.flags[:FLAG_ROWS]) or ["No operator, rotor type, machine or customer lies "
                                             "outside the 99.8 % limits of rework or first pass"]
    story.append(Paragraph(esc(" ".join(f"{f}." for f in flags)), st.cell))
    if data.caution:
        story.append(Paragraph(esc(data.caution), st.caution))

    story.append(Paragraph("What rework cost", st.heading))
    if data.cost_summary:
        story.append(Paragraph(esc(data.cost_summary), st.cell))
    rows = [["Reason behind the rework", "Times", "Machine hours", "Running share"]]
    rows += [[_clip(r.reason, REASON_CHARS), r.reworks, r.hours, r.cumulative]
             for r in data.cost_reasons[:REASON_ROWS]]
    if len(rows) == 1:
        rows.append(["no rework in this period", "", "", ""])
    story.append(grid_table(rows, [width - 66 * mm, 16 * mm, 25 * mm, 25 * mm],
                            align_right_from=1))

    story.append(Paragraph("Drifting the wrong way", st.heading))
    lines = list(data.drift[:DRIFT_ROWS]) or ["No rotor or machine drifts the wrong way "
                                             "beyond chance."]
    story.append(Paragraph(esc(" ".join(_clip(line, DRIFT_CHARS) for line in lines)), st.cell))
    rejected = [["Rejection reason", "Jobs"]]
    rejected += [[_clip(r.reason, 60), str(r.count)] for r in data.rejection_reasons[:4]]
    if len(rejected) == 1:
        rejected.append(["none in this period", ""])
    machines = [["Machine", "Runs", "Due", "Status"]]
    for m in data.machines[: LIST_ROWS]:
        machines.append([_clip(m.name, 30), str(m.runs), date(m.due_on), m.status])
    story.append(_side_by_side(
        [Paragraph("Rejection reasons", st.heading),
         grid_table(rejected, [half - 14 * mm, 12 * mm], align_right_from=1)],
        [Paragraph("Machines: use and verification", st.heading),
         grid_table(machines, [half - 54 * mm, 12 * mm, 20 * mm, 22 * mm], align_right_from=1)],
        width))
    if data.definitions:
        story.append(Paragraph("How the charts and the cost are made", st.heading))
        story.append(Paragraph(esc(" ".join(data.definitions)), st.small))
    cut = [name for name, items, n in (
        ("rework reasons", data.cost_reasons, REASON_ROWS),
        ("rejection reasons", data.rejection_reasons, 4),
        ("units outside the limits", data.flags, FLAG_ROWS),
        ("drift", data.drift, DRIFT_ROWS),
        ("machines", data.machines, LIST_ROWS),
    ) if len(items) > n]
    if cut:
        story.append(Paragraph(esc("Lists cut to their first rows: " + ", ".join(cut)
                                   + ". The dashboard and its CSV files have them all."),
                               st.small))
    meta = DocumentMeta(
        title=f"Shop report {label}",
        created=created,
        id_seed=f"shop-month {data.start.isoformat()} {data.as_of.isoformat()}",
        author=shop,
        subject="Monthly shop measures",
        header_left=f"{shop} · shop report",
        header_right=label,
        footer_left=f"figures as of {date(data.as_of)}",
    )
    return build_pdf(story, meta)
