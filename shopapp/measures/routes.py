"""The owner's dashboard: period figures with their intervals, funnel plots, control
charts, rework cost, drift, tables by slice, drill-down, CSV and PDF.

``GET /dashboard`` shows one period (week, month, quarter, year or a range) against
the one before (like for like while it is in progress); every point, bar and number
links to the job list with the same filters (``jobs.index`` query parameters of
``JobFilter``). ``GET /dashboard.csv?table=…`` gives any table with the same filters
(header in the trade's words; ``&names=machine`` for the stable measure names, see
:mod:`shopapp.measures.tables`), ``GET /dashboard/report.pdf?month=YYYY-MM`` the
monthly report. Nothing here writes to the database.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import re
from collections.abc import Iterable, Sequence
from typing import Any
from urllib.parse import urlencode

from flask import Blueprint, Response, current_app, g, render_template, request, url_for
from flask_login import current_user

from shopapp.charts.svg import to_svg
from shopapp.core.clock import shop_today
from shopapp.core.errors import ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.permissions import can
from shopapp.core.web import acting_user, requires
from shopapp.measures import monthly
from shopapp.measures import services as measures
from shopapp.measures.charts import funnel_chart, machine_chart, pareto_chart, pchart_chart
from shopapp.measures.costs import cost_settings
from shopapp.measures.definitions import DEFINITIONS
from shopapp.measures.figures import DIMENSION_LABELS, RATES, REWORK_WINDOW_DAYS, SliceRow
from shopapp.measures.forms import SCOPE_FIELDS, PeriodForm, period_args
from shopapp.measures.periods import Period, Scope, parse_month
from shopapp.measures.signals import COMPARISON_RULE, FUNNEL_DIMENSIONS
from shopapp.measures.stats import CAUTION
from shopapp.measures.tables import NAMES, TABLES, csv_value, table_for, table_rows
from shopapp.measures.texts import (
    cost_summary,
    headline_rows,
    hours_text,
    interval_text,
    machine_drift_text,
    measure_text,
)

bp = Blueprint("dashboard", __name__, template_folder="templates")

# Slice → the JobFilter parameter of the job list.
FILTER_PARAM = {"operator": "operator_id", "machine": "machine_id",
                "rotor_type": "rotor_type_id", "customer": "customer_id"}
# Columns of every slice table (page and CSV): measure name and heading.
SLICE_COLUMNS: tuple[tuple[str, str], ...] = (
    ("jobs_received", "received"),
    ("jobs_dispatched", "dispatched"),
    ("wip_jobs", "WIP"),
    ("wip_age_max_wd", "oldest WIP (wd)"),
    ("turnaround_median_wd", "turnaround median (wd)"),
    ("turnaround_p90_wd", "turnaround p90 (wd)"),
    ("promised_hit_rate", "on time"),
    ("reached_in_tolerance", "reached tolerance"),
    ("first_pass_rate", "first pass"),
    ("correction_cycles_mean", "cycles"),
    ("reworked_jobs", f"reworked in {REWORK_WINDOW_DAYS} days"),
    ("rework_rate", "rework rate"),
    ("rejected_jobs", "rejected"),
    ("rejection_rate", "rejection rate"),
)


# --------------------------------------------------------------------------- links
def jobs_url(args: dict[str, Any]) -> str:
    """The job list filtered by ``args`` (``/jobs?...`` until the jobs area exists)."""
    clean = {k: str(v) for k, v in args.items() if v is not None and v != ""}
    # The page draws hundreds of these links: build the list's path once per request.
    base = g.get("jobs_index_path")
    if base is None:
        base = url_for("jobs.index") if "jobs.index" in current_app.view_functions else "/jobs"
        g.jobs_index_path = base
    return base + ("?" + urlencode(clean) if clean else "")


def _month_range(key: str) -> tuple[str, str]:
    start = dt.date(int(key[:4]), int(key[5:7]), 1)
    return start.isoformat(), Period.month(start.year, start.month).end.isoformat()


class Links:
    """Drill-down links for one period and scope (JobFilter query parameters)."""

    def __init__(self, period: Period, scope: Scope) -> None:
        self.period = period
        self.scope = scope.as_args()

    def _base(self, row: SliceRow | None) -> dict[str, Any] | None:
        args: dict[str, Any] = dict(self.scope)
        if row is None:
            return args
        if row.dimension == "month":
            return args
        if row.key is None:
            return None  # "not assigned" cannot be filtered in the job list
        args[FILTER_PARAM[row.dimension]] = row.key
        return args

    def _dates(self, row: SliceRow | None, field: str) -> dict[str, str]:
        if row is not None and row.dimension == "month" and row.key:
            start, end = _month_range(row.key)
        else:
            start, end = self.period.start.isoformat(), self.period.end.isoformat()
        return {f"{field}_from": start, f"{field}_to": end}

    def measure(self, row: SliceRow | None, name: str) -> str | None:
        """The jobs behind ``name`` for ``row`` (None: the whole period)."""
        args = self._base(row)
        if args is None:
            return None
        if name in ("jobs_dispatched", "turnaround_median_wd", "turnaround_p90_wd",
                    "promised_hit_rate"):
            return jobs_url({**args, **self._dates(row, "dispatched")})
        if name in ("reworked_jobs", "rework_rate", "rework"):
            return jobs_url({**args, **self._dates(row, "reached"), "reworked": "window"})
        if name in ("reached_in_tolerance", "first_pass_rate", "correction_cycles_mean"):
            return jobs_url({**args, **self._dates(row, "reached")})
        if name in ("rejected_jobs", "rejection_rate"):
            return jobs_url({**args, **self._dates(row, "rejected")})
        if name in ("wip_jobs", "wip_age_median_wd", "wip_age_max_wd", "jobs_closed"):
            return None  # these span states (or two dates); no single filter shows them
        return jobs_url({**args, **self._dates(row, "received")})

    def rotor(self, rotor_id: int) -> str:
        """Every job of one rotor (its visits)."""
        return jobs_url({"rotor_id": rotor_id})

    def chart(self, row: SliceRow, what: str) -> str | None:
        return self.measure(row, "rework" if what == "rework" else "reached_in_tolerance")

    def focus(self, row: SliceRow) -> str | None:
        """The dashboard narrowed to this operator / machine / rotor type / customer."""
        if row.dimension == "month":
            if not row.key:
                return None
            start, _end = _month_range(row.key)
            return url_for("dashboard.index", period="month", on=start,
                           **{k: str(v) for k, v in self.scope.items()})
        if row.key is None:
            return None
        args = period_args(self.period, Scope(**{**self.scope,
                                                 FILTER_PARAM[row.dimension]: int(row.key)}))
        return url_for("dashboard.index", **args)


# --------------------------------------------------------------------------- request parsing
def _today() -> dt.date:
    """The shop's today (one place, so tests can fix the calendar)."""
    return shop_today()


def _parse() -> tuple[PeriodForm, Period, Scope, dict[str, str], list[tuple[str, str]], bool]:
    """The period form, the period, the scope with the names of its focus (ids that name
    nothing dropped), (field, why) for what was dropped, and whether the form was valid."""
    form = PeriodForm(formdata=request.args)
    today = _today()
    ok = form.validate() if request.args else True
    if not request.args:
        form.period.data = "year"
    period = form.period_value(today) if ok else Period.containing("year", today)
    if period.start > today:  # a period not begun has no figures to show
        chosen = form.start if period.kind == "custom" else form.on
        what = "range" if period.kind == "custom" else period.kind
        chosen.errors = [*chosen.errors, f"the {what} starting {period.start.isoformat()} "
                         f"has not begun (today is {today.isoformat()})"]
        ok, period = False, Period.containing("year", today)
    scope, dropped = form.scope_value()
    scope, names, unknown = measures.known_scope(db_session(), scope, by=acting_user())
    return form, period, scope, names, dropped + unknown, ok


def _report(period: Period, scope: Scope) -> measures.ShopReport:
    return measures.shop_report(db_session(), period, scope=scope, today=_today(),
                                by=acting_user(), costs=cost_settings(current_app.config))


def _scope_labels(report: measures.ShopReport, names: dict[str, str]
                  ) -> list[tuple[str, str, str]]:
    """(what, name, dashboard URL without it) for each active focus."""
    out = []
    wanted = report.scope.as_args()
    for dim, param in FILTER_PARAM.items():
        if param not in wanted:
            continue
        rest = {k: v for k, v in wanted.items() if k != param}
        out.append((DIMENSION_LABELS[dim], names[param],
                    url_for("dashboard.index", **period_args(report.period, Scope(**rest)))))
    return out


def _charts(report: measures.ShopReport, links: Links, period: Period,
            scope: Scope) -> dict[str, Any]:
    """Every chart of the page as SVG text, keyed by name."""
    trend_links = Links(report.trend_period or period, scope)
    charts: dict[str, Any] = {}
    for name, chart in report.control_charts.items():
        charts[f"pchart_{name}"] = to_svg(pchart_chart(
            chart, report.trend, name, link=trend_links.chart, width=340, height=235))
    for name, per_dim in report.funnels.items():
        for dim, uf in per_dim.items():
            charts[f"funnel_{name}_{dim}"] = to_svg(funnel_chart(uf, link=links.chart,
                                                                 width=340, height=250))
    if report.cost is not None and any(r.seconds for r in report.cost.reasons):
        charts["pareto"] = to_svg(pareto_chart(report.cost.reasons))
    for m in report.drift.machines:
        if len(m.tests) >= 2:
            charts[f"machine_{m.machine_id}"] = to_svg(machine_chart(m))
    return charts


@bp.get("/dashboard")
@requires("view_dashboard")
def index():  # type: ignore[no-untyped-def]
    form, period, scope, names, notes, ok = _parse()
    report = _report(period, scope)
    links = Links(period, scope)
    args = period_args(period, scope)
    prev_args = period_args(period.previous(), scope)
    next_start = period.end + dt.timedelta(days=1)
    if period.kind == "custom":
        nxt = Period(next_start, next_start + dt.timedelta(days=period.days - 1), "custom")
    else:
        nxt = Period.containing(period.kind, next_start)
    status = 200 if ok else 422
    return render_template(
        "dashboard/index.html",
        form=form, report=report, links=links, charts=_charts(report, links, period, scope),
        args=args, notes=[f"{name}: {why}; ignored" for name, why in notes],
        headline=headline_rows(report.figures, report.previous, report.changes),
        slice_columns=SLICE_COLUMNS, dimension_labels=DIMENSION_LABELS, fmt=measure_text,
        rates=RATES, interval_text=interval_text, funnel_dimensions=FUNNEL_DIMENSIONS,
        flags=report.funnel_flags(), caution=CAUTION, comparison_rule=COMPARISON_RULE,
        definitions=DEFINITIONS, hours_text=hours_text,
        cost_text=cost_summary(report.cost, report.period_label) if report.cost else "",
        machine_drift_text=machine_drift_text,
        prev_url=url_for("dashboard.index", **prev_args),
        next_url=(url_for("dashboard.index", **period_args(nxt, scope))
                  if nxt.start <= _today() else None),
        report_month=f"{min(period.end, _today()):%Y-%m}",
        focus=_scope_labels(report, names),
    ), status


# --------------------------------------------------------------------------- CSV
def _csv(header: Sequence[str], rows: Iterable[Sequence[Any]]) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\r\n")
    w.writerow(header)
    for row in rows:
        w.writerow([_safe_cell(csv_value(v)) for v in row])
    return buf.getvalue()


def _safe_cell(text: str) -> str:
    # A cell starting with = + - @ would run as a formula in a spreadsheet (CSV injection);
    # numbers (including negative ones) are left alone.
    if text and text[0] in "=+-@\t\r" and not re.fullmatch(r"-?\d+(\.\d+)?", text):
        return "'" + text
    return text


@bp.get("/dashboard.csv", endpoint="csv")
@requires("view_dashboard")
def csv_download():  # type: ignore[no-untyped-def]
    table = request.args.get("table", "headline")
    if table not in TABLES:
        raise ValidationFailed("table", f"'{table[:40]}' is not one of {', '.join(TABLES)}")
    names = request.args.get("names", "trade")
    if names not in NAMES:
        raise ValidationFailed("names", f"'{names[:20]}' is not one of {', '.join(NAMES)}")
    form, period, scope, _names, dropped, ok = _parse()
    if dropped:  # a file for a focus that names nothing would look like the whole shop's
        raise ValidationFailed(*dropped[0])
    if not ok:
        field_name, errors = next(iter(form.errors.items()))
        raise ValidationFailed(field_name, "; ".join(str(e) for e in errors))
    report = _report(period, scope)
    header, rows = table_for(report, table, names)
    # Named by the period the figures cover, as the dashboard labels it; a period still
    # running says the day its figures reach (a name ending in the period's last day
    # read like a download date, or like figures not yet there).
    today = _today()
    upto = f"-so-far-{today.isoformat()}" if period.in_progress(today) else ""
    name = f"shop-{table}-{period.slug}{upto}.csv"
    return Response(_csv(header, rows), mimetype="text/csv",
                    headers={"Content-Disposition": f'attachment; filename="{name}"'})


# --------------------------------------------------------------------------- monthly PDF
@bp.get("/dashboard/report.pdf")
@requires("view_dashboard")
def monthly_pdf():  # type: ignore[no-untyped-def]
    month = parse_month(request.args.get("month") or f"{_today():%Y-%m}", today=_today())
    report = measures.shop_report(db_session(), month, today=_today(), by=acting_user(),
                                  costs=cost_settings(current_app.config))
    pdf = monthly.render(report)
    name = f"shop-report-{month.start:%Y-%m}.pdf"
    return Response(pdf, mimetype="application/pdf",
                    headers={"Content-Disposition": f'inline; filename="{name}"'})


# --------------------------------------------------------------------------- start page
@bp.app_context_processor
def _home_helpers() -> dict[str, Any]:
    def dashboard_headline() -> measures.Headline | None:
        if not current_user.is_authenticated or not can(current_user, "view_dashboard"):
            return None
        return measures.headline(db_session(), by=acting_user(), today=_today())

    return {"dashboard_headline": dashboard_headline, "dashboard_fmt": measure_text}


__all__ = ["SCOPE_FIELDS", "bp", "csv_value", "table_rows"]
