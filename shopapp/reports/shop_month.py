"""The monthly shop report: a two-page PDF an owner prints, from a :class:`ShopMonth`.

Page 1: the month's headline figures against the previous month and the
twelve-month trend of first-pass and rework rate. Page 2: where the rework comes
from (rotor types and operators), rework and rejection reasons, rotors getting
worse and the machines' use and verification status. Long lists are cut to
their first rows (the dashboard and its CSV files have them all) so the report
stays on two pages.

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
from reportlab.platypus import PageBreak, Paragraph, Spacer, Table, TableStyle

from shopapp.charts import Figure
from shopapp.core.display import date, number
from shopapp.reports.common import DocumentMeta, build_pdf, esc, grid_table, keep, styles
from shopapp.reports.drawing import to_drawing

LIST_ROWS = 6  # rows of each list on paper


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
    figures and the change in words."""

    name: str
    label: str
    now: str
    before: str
    change: str


@dataclass(frozen=True)
class ShopMonth:
    """Everything the monthly report prints."""

    shop_name: str
    period_label: str
    start: dt.date
    end: dt.date
    previous_label: str
    previous_start: dt.date
    previous_end: dt.date
    as_of: dt.date
    headline: Sequence[HeadlineRow]
    trend: Figure
    rework_by_rotor_type: Figure
    rework_by_operator: Figure
    rework_reasons: Sequence[ReasonCount]
    rejection_reasons: Sequence[ReasonCount]
    rotors_getting_worse: Sequence[WorseningRotor]
    machines: Sequence[MachineStatus]


def _side_by_side(left: Any, right: Any, width: float) -> Table:
    t = Table([[left, right]], colWidths=[width / 2, width / 2])
    t.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"),
                           ("LEFTPADDING", (0, 0), (-1, -1), 0),
                           ("RIGHTPADDING", (0, 0), (-1, -1), 4)]))
    return t


def _fit(fig: Figure, width: float) -> Any:
    return to_drawing(fig, scale=min(1.0, width / fig.width))


def render(data: ShopMonth, *, created: dt.datetime | None = None) -> bytes:
    """The two-page monthly report as PDF bytes (deterministic for a given ``created``)."""
    st = styles()
    created = created or dt.datetime.combine(data.as_of, dt.time(0), tzinfo=dt.UTC)
    width = 174 * mm  # A4 less the margins of shopapp.reports.common
    label = data.period_label
    shop = data.shop_name or "Balancing shop"
    story: list[Any] = [
        Paragraph(esc(f"{shop} — shop report, {label}"), st.title),
        Paragraph(esc(f"{date(data.start)} to {date(data.end)}, against "
                      f"{date(data.previous_start)} to {date(data.previous_end)}. Working days "
                      "are Monday to Friday; definitions as in the shop's README."), st.subtitle),
    ]
    head = [["Measure", label, data.previous_label, "Change"]]
    head += [[row.label.strip(), row.now, row.before, row.change] for row in data.headline]
    story.append(keep(Paragraph("The month in figures", st.heading),
                      grid_table(head, [70 * mm, 28 * mm, 28 * mm, 48 * mm],
                                 align_right_from=1)))
    story.append(Spacer(1, 4 * mm))
    story.append(keep(Paragraph("Is it getting better?", st.heading),
                      _fit(data.trend, width)))
    story.append(Paragraph(esc(
        "First-pass rate: share of the jobs that reached tolerance in the month whose first "
        "check after the first correction was within tolerance in every plane. Rework rate: "
        "jobs reopened plus return jobs received in the month, per job that reached "
        "tolerance in it."), st.small))
    story.append(PageBreak())

    half = width / 2 - 4
    story.append(Paragraph("Where the rework comes from", st.heading))
    story.append(_side_by_side(_fit(data.rework_by_rotor_type, half),
                               _fit(data.rework_by_operator, half), width))

    def reasons(title: str, items: Sequence[ReasonCount]) -> list[Any]:
        rows = [["Reason", "Jobs"]] + [[r.reason, str(r.count)] for r in items[:LIST_ROWS]]
        if not items:
            rows.append(["none in this period", ""])
        return [Paragraph(title, st.heading),
                grid_table(rows, [half - 16 * mm, 14 * mm], align_right_from=1)]

    rw = reasons("Rework reasons", data.rework_reasons)
    rj = reasons("Rejection reasons", data.rejection_reasons)
    story.append(_side_by_side(rw, rj, width))

    worse = [["Serial", "Customer", "Rotor type", "Latest job", "Initial unbalance, oldest first"]]
    for w in data.rotors_getting_worse[:LIST_ROWS]:
        worse.append([w.serial_number, w.customer, w.rotor_type, w.job_number,
                      " → ".join(number(a) for a in w.initial_amplitudes) + f" {w.unit}"])
    if len(worse) == 1:
        worse.append(["none this period", "", "", "", ""])
    story.append(keep(Paragraph("Rotors getting worse", st.heading),
                      grid_table(worse, [24 * mm, 38 * mm, 28 * mm, 26 * mm, 58 * mm])))

    machines = [["Machine", "Jobs", "Runs", "Last verified", "Due", "Status"]]
    for m in data.machines[: LIST_ROWS + 2]:
        machines.append([m.name, str(m.jobs), str(m.runs), date(m.last_verified_on),
                         date(m.due_on), m.status])
    story.append(keep(Paragraph("Machines: use this month and verification today", st.heading),
                      grid_table(machines, [46 * mm, 16 * mm, 16 * mm, 28 * mm, 28 * mm,
                                            40 * mm], align_right_from=1)))
    cut = [name for name, items, n in (
        ("rework reasons", data.rework_reasons, LIST_ROWS),
        ("rejection reasons", data.rejection_reasons, LIST_ROWS),
        ("rotors getting worse", data.rotors_getting_worse, LIST_ROWS),
        ("machines", data.machines, LIST_ROWS + 2),
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
