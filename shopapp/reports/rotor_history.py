"""Rotor history reports: one serial's visits with a trend chart, and a rotor type's
distribution of initial unbalance and correction steps over all its serials.

Plain data in (dataclasses built by ``services.rotor_history``), PDF bytes out.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
from dataclasses import asdict, dataclass

from reportlab.lib.pagesizes import landscape
from reportlab.lib.units import mm
from reportlab.platypus import Flowable, Paragraph, Spacer

from shopapp.charts import Figure
from shopapp.charts.trend import TrendSeries, trend_figure
from shopapp.core import display
from shopapp.reports.common import (
    MARGIN,
    PAGE_SIZE,
    DocumentMeta,
    build_pdf,
    esc,
    grid_table,
    keep,
    styles,
)
from shopapp.reports.drawing import FigureFlowable

GROWTH_RULE = ("Growth note rule (ours): the initial unbalance of a plane rose by at least 10 % "
               "at each of the last two visits, i.e. three visits in a row each higher than the "
               "one before.")

# Landscape: a visit's line holds a dozen columns.
PAGE = landscape(PAGE_SIZE)
_WIDTH = PAGE[0] - 2 * MARGIN


@dataclass(frozen=True)
class Visit:
    """One job of the rotor."""

    job_number: str
    kind: str  # "new" | "return"
    return_of: str  # earlier job's number for a return
    received_on: str
    finished_on: str  # dispatch date, "" while open
    state: str
    reopen_count: int
    rework: bool  # reopened, or a customer return
    initial_gmm: tuple[float | None, ...]  # per correction plane
    initial_pct: tuple[float | None, ...]  # % of the plane limit
    residual_pct: tuple[float | None, ...]  # last check run, % of the plane limit
    passed: bool | None  # verdict of the last check run (None: not judged)
    corrections: int
    correction_steps: int
    correction_mass_g: tuple[float, ...]  # total mass fitted or removed per plane
    certificate: str
    # A past job imported from spreadsheets: no initial reading, its residual and
    # verdict are the old records' (shopapp.imports).
    imported: bool = False


@dataclass(frozen=True)
class RotorHistoryData:
    shop_name: str
    generated_at: str  # ISO UTC
    customer_name: str
    serial_number: str
    rotor_part_number: str
    rotor_description: str
    planes: int
    visits: tuple[Visit, ...]
    growth_note: str
    growth_rule: str


@dataclass(frozen=True)
class Bin:
    label: str
    count: int


@dataclass(frozen=True)
class SerialSummary:
    serial_number: str
    visits: int
    last_received_on: str
    reworked: int
    last_initial_gmm: tuple[float | None, ...]
    growing: bool


@dataclass(frozen=True)
class RotorTypeHistoryData:
    shop_name: str
    generated_at: str
    customer_name: str
    rotor_part_number: str
    rotor_description: str
    planes: int
    jobs: int
    initial_pct_bins: tuple[tuple[Bin, ...], ...]  # per plane
    initial_median_gmm: tuple[float | None, ...]
    initial_p90_gmm: tuple[float | None, ...]
    cycle_bins: tuple[Bin, ...]
    serials: tuple[SerialSummary, ...]
    growth_rule: str


def _meta(title: str, data: object, generated_at: str, shop: str, right: str) -> DocumentMeta:
    seed = hashlib.sha256(json.dumps(asdict(data), sort_keys=True,  # type: ignore[call-overload]
                                     default=str).encode()).hexdigest()
    return DocumentMeta(
        title=title, created=dt.datetime.fromisoformat(generated_at), id_seed=seed,
        author=shop, subject=title, header_left=f"{shop} · {title}", header_right=right,
        footer_left=f"generated {generated_at[:10]}",
    )


def _pct(v: float | None) -> str:
    return display.of_limit(v)


def trend_figures(data: RotorHistoryData, width: float = _WIDTH) -> list[Figure]:
    """The two trend charts over the visit dates (spaced by time).

    Initial unbalance per plane in g·mm, and the residual of the last check run
    in % of the plane limit with the 100 % line. A visit that was reworked or a
    customer return carries "W" or "R" after its date label.
    """
    dates = [dt.date.fromisoformat(v.received_on) for v in data.visits]
    marks = {d: ("R" if v.kind == "return" else "W") for d, v in zip(dates, data.visits,
                                                                    strict=True) if v.rework}

    def label(x: str | dt.date) -> str:
        text = x.isoformat() if isinstance(x, dt.date) else str(x)
        return f"{text} {marks[x]}" if isinstance(x, dt.date) and x in marks else text

    initial = [TrendSeries(f"initial, plane {k + 1}",
                           tuple(v.initial_gmm[k] for v in data.visits))
               for k in range(data.planes)]
    residual = [TrendSeries(f"residual, plane {k + 1}",
                            tuple(v.residual_pct[k] for v in data.visits))
                for k in range(data.planes)]
    return [
        trend_figure(dates, initial, title="Initial unbalance per visit", y_label="g·mm",
                     y_min=0.0, x_format=label, width=width, height=190.0, max_x_labels=8),
        trend_figure(dates, residual, title="Residual after balancing", y_label="% of limit",
                     y_min=0.0, limit=100.0, limit_label="limit (100 %)", x_format=label,
                     width=width, height=170.0, max_x_labels=8),
    ]


def render(data: RotorHistoryData) -> bytes:
    """The history of one rotor as PDF bytes."""
    st = styles()
    story: list[Flowable] = [
        Paragraph(esc(data.shop_name), st.subtitle),
        Paragraph(esc(f"Rotor history · serial {data.serial_number}"), st.title),
        Paragraph(esc(f"{data.customer_name} · {data.rotor_part_number} "
                      f"{data.rotor_description}".strip()), st.body),
        Spacer(1, 3 * mm),
    ]
    if not data.visits:
        story.append(Paragraph("No jobs recorded for this rotor yet.", st.body))
    else:
        if data.growth_note:
            story.append(Paragraph(esc(data.growth_note), st.caution))
        else:
            story.append(Paragraph(esc("No steady growth of the initial unbalance."), st.body))
        story.append(Paragraph(esc(data.growth_rule), st.small))
        story.append(Spacer(1, 3 * mm))
        for fig in trend_figures(data):
            story.append(FigureFlowable(fig))
            story.append(Spacer(1, 2 * mm))
        story.append(Paragraph(esc("W after a date: the job was reworked (reopened); "
                                   "R: a customer return."), st.small))
        head = ["Visit", "Job", "Received", "Dispatched"]
        head += [f"Initial P{k + 1} (g·mm)" for k in range(data.planes)]
        head += [f"Residual P{k + 1}" for k in range(data.planes)]
        head += ["Steps", "Marks", "Certificate"]
        rows = [head]
        for i, v in enumerate(data.visits, start=1):
            mark = []
            if v.kind == "return":
                mark.append(f"return of {v.return_of}")
            if v.reopen_count:
                mark.append(f"reopened ×{v.reopen_count}")
            if v.imported:
                mark.append("imported (old records)")
            if v.passed is False:
                mark.append("last check out")
            rows.append([str(i), v.job_number, v.received_on, v.finished_on or v.state,
                         *[display.number(u) for u in v.initial_gmm],
                         *[_pct(p) for p in v.residual_pct],
                         str(v.correction_steps), "; ".join(mark), v.certificate or "–"])
        n = len(head)
        widths = [_WIDTH * w for w in ([0.04, 0.1, 0.08, 0.08] + [0.08] * data.planes
                                       + [0.07] * data.planes + [0.04])]
        rest = _WIDTH - sum(widths)
        widths += [rest * 0.45, rest * 0.55]
        assert len(widths) == n
        story.append(keep(Paragraph("Visits", st.heading), grid_table(rows, widths)))
    meta = _meta(f"Rotor history {data.serial_number}", data, data.generated_at,
                 data.shop_name, f"{data.customer_name} · serial {data.serial_number}")
    return build_pdf(story, meta, pagesize=PAGE)


def render_type(data: RotorTypeHistoryData) -> bytes:
    """All serials of a rotor type: distributions and one line per serial, as PDF bytes."""
    st = styles()
    story: list[Flowable] = [
        Paragraph(esc(data.shop_name), st.subtitle),
        Paragraph(esc(f"Rotor type history · {data.rotor_part_number}"), st.title),
        Paragraph(esc(f"{data.customer_name} · {data.rotor_description} · {data.jobs} jobs on "
                      f"{len(data.serials)} serials"), st.body),
    ]
    rows = [["Initial unbalance, % of the plane limit",
             *[f"plane {k + 1}" for k in range(data.planes)]]]
    if data.initial_pct_bins:
        for i, b in enumerate(data.initial_pct_bins[0]):
            rows.append([b.label, *[str(bins[i].count) for bins in data.initial_pct_bins]])
    rows.append(["median initial (g·mm)",
                 *[display.number(u) for u in data.initial_median_gmm]])
    rows.append(["90th percentile initial (g·mm)",
                 *[display.number(u) for u in data.initial_p90_gmm]])
    w = [_WIDTH * 0.5] + [_WIDTH * 0.5 / max(data.planes, 1)] * data.planes
    story.append(keep(Paragraph("Distribution of initial unbalance", st.heading),
                      grid_table(rows, w, align_right_from=1)))
    crow = [["Correction steps to reach tolerance", "jobs"]]
    crow += [[b.label, str(b.count)] for b in data.cycle_bins]
    story.append(keep(Paragraph("Correction steps", st.heading),
                      grid_table(crow, [_WIDTH * 0.5, _WIDTH * 0.2], align_right_from=1)))
    srow = [["Serial", "Visits", "Last received", "Reworked",
             *[f"Last initial P{k + 1} (g·mm)" for k in range(data.planes)], "Growing"]]
    for s in data.serials:
        srow.append([s.serial_number, str(s.visits), s.last_received_on, str(s.reworked),
                     *[display.number(u) for u in s.last_initial_gmm], "yes" if s.growing else ""])
    story.append(keep(Paragraph("Serials", st.heading), grid_table(srow)))
    story.append(Paragraph(esc(data.growth_rule), st.small))
    meta = _meta(f"Rotor type history {data.rotor_part_number}", data, data.generated_at,
                 data.shop_name, f"{data.customer_name} · {data.rotor_part_number}")
    return build_pdf(story, meta, pagesize=PAGE)
