"""The dashboard's tables as rows: what the CSV files hold (the page shows the same numbers).

Column names: every CSV starts with one header row. By default it is in the trade's
words ("turnaround, median (working days)"), for people who open the file in a
spreadsheet; ``names="machine"`` (``/dashboard.csv?…&names=machine``) gives the stable
measure names instead (``turnaround_median_wd``), for scripts. Both rows name the same
columns in the same order (:func:`header`). Rates are fractions (0.25 = 25 %), each
followed by the ends of its 95 % interval.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from typing import Any

from shopapp.core import display
from shopapp.measures.figures import DIMENSIONS, FIGURE_NAMES, RATES, REWORK_WINDOW_DAYS, Figures
from shopapp.measures.services import ShopReport

SLICE_TABLES = {f"by_{dim}": dim for dim in DIMENSIONS}
TABLES: tuple[str, ...] = (
    "headline", *SLICE_TABLES, "trend", "funnels", "rework_cost", "machine_time",
    "rework_reasons",
    "rejection_reasons", "rotors_getting_worse", "drift_rotors", "drift_machines", "machines",
)
NAMES = ("trade", "machine")

#: The trade's words for each machine-readable column name.
WORDS: dict[str, str] = {
    "jobs_received": "jobs received",
    "jobs_dispatched": "jobs dispatched",
    "wip_jobs": "work in progress (jobs)",
    "wip_age_median_wd": "work in progress, median age (working days)",
    "wip_age_max_wd": "work in progress, oldest (working days)",
    "turnaround_median_wd": "turnaround, median (working days)",
    "turnaround_p90_wd": "turnaround, 90th percentile (working days)",
    "promised_jobs": "dispatched with a promised date",
    "promised_hit": "dispatched by the promised date",
    "reached_in_tolerance": "jobs that reached tolerance",
    "first_pass_judged": "jobs judged for first pass",
    "first_pass_jobs": "jobs that passed first time",
    "correction_cycles_mean": "correction cycles, mean",
    "reworked_jobs": f"reworked within {REWORK_WINDOW_DAYS} days",
    "jobs_closed": "jobs that left the shop (dispatched or rejected)",
    "rejected_jobs": "jobs rejected",
    "promised_hit_rate": "share dispatched by the promised date",
    "first_pass_rate": "first-pass rate",
    "rework_rate": "rework rate",
    "rejection_rate": "rejection rate",
    "measure": "measure",
    "operator": "operator", "operator_id": "operator id",
    "machine": "machine", "machine_id": "machine id",
    "rotor_type": "rotor type", "rotor_type_id": "rotor type id",
    "customer": "customer", "customer_id": "customer id",
    "month": "month", "month_key": "month (YYYY-MM)",
    "reason": "reason", "jobs": "jobs", "reworks": "reworks",
    "rework_hours": "rework machine hours", "percent": "share of rework hours (%)",
    "cumulative_percent": "running share (%)",
    "rate": "rate", "dimension": "by", "key": "id", "label": "unit",
    "numerator": "count", "denominator": "out of", "value": "rate",
    "low95": "95 % interval, low", "high95": "95 % interval, high",
    "limit95_low": "95 % limit, low", "limit95_high": "95 % limit, high",
    "limit998_low": "99.8 % limit, low", "limit998_high": "99.8 % limit, high",
    "flag": "outside the 99.8 % limits",
    "serial_number": "serial number", "latest_job": "latest job", "received_on": "received",
    "unit": "unit", "initial_amplitudes_oldest_first": "initial unbalance, oldest first",
    "measured_as": "measured as", "values_oldest_first": "values, oldest first",
    "visits": "visits", "slope_per_year": "slope per year", "p_value": "p-value",
    "mean_interval_days": "days between visits, mean",
    "rising_beyond_chance": "rising beyond chance",
    "tests": "proving tests", "latest_on": "latest test", "latest_umar_gmm": "latest U_mar (g·mm)",
    "claim_gmm": "claimed U_mar (g·mm)", "due_on": "next due", "warning": "warning",
    "runs": "runs", "last_verified_on": "last verified", "status": "status",
    "name": "name", "first_hours": "first-time machine hours",
    "first_jobs": "jobs with first-time runs",
    "rework_jobs": "jobs with rework runs", "rework_share": "rework share of machine hours",
}


def _with_intervals(names: Sequence[str]) -> list[str]:
    """Figure names with each rate followed by its interval columns."""
    out: list[str] = []
    for name in names:
        out.append(name)
        if name in RATES:
            out += [f"{name}_low95", f"{name}_high95"]
    return out


FIGURE_COLUMNS = _with_intervals(FIGURE_NAMES)


def words(name: str) -> str:
    """The trade's words for a column name (interval columns included)."""
    for end, tail in (("_low95", ", 95 % interval, low"), ("_high95", ", 95 % interval, high")):
        if name.endswith(end) and name[: -len(end)] in WORDS:
            return WORDS[name[: -len(end)]] + tail
    return WORDS.get(name, name.replace("_", " "))


def header(names: Sequence[str], style: str) -> list[str]:
    """The header row: the machine names, or (default) the trade's words for them."""
    return list(names) if style == "machine" else [words(n) for n in names]


def figure_values(f: Figures) -> list[Any]:
    """One slice's values in the order of :data:`FIGURE_COLUMNS`."""
    values = f.as_dict()
    out: list[Any] = []
    for name in FIGURE_NAMES:
        out.append(values[name])
        if name in RATES:
            interval = f.rate(name).interval_95
            out += list(interval) if interval else [None, None]
    return out


def csv_value(value: Any) -> str:
    """A CSV cell: text as it is, dates as ISO dates, numbers machine-readable (rates as
    fractions to 4 places, empty for none), yes/no as 1/0."""
    if isinstance(value, bool):
        return "1" if value else "0"
    if isinstance(value, str):
        return value
    if isinstance(value, dt.date):
        return display.date(value)
    return display.csv_number(value)


def table_for(report: ShopReport, table: str, names: str = "trade"
              ) -> tuple[list[str], list[list[Any]]]:
    """Header row (trade words, or machine names with ``names="machine"``) and rows."""
    columns, rows = table_rows(report, table)
    if names == "machine":
        return columns, rows
    if table == "headline":
        return (["measure", report.period_label, report.previous_label],
                [[words(r[0]), *r[1:]] for r in rows])
    return header(columns, names), rows


def table_rows(report: ShopReport, table: str) -> tuple[list[str], list[list[Any]]]:
    """Machine column names and rows of one dashboard table."""
    if table == "headline":
        names = ["measure", "now", "before"]
        now, before = report.figures, report.previous
        rows = [[n, a, b] for n, a, b in zip(FIGURE_COLUMNS, figure_values(now),
                                              figure_values(before), strict=True)]
        return names, rows
    if table in SLICE_TABLES or table == "trend":
        dim = SLICE_TABLES.get(table, "month")
        slices = report.trend if table == "trend" else report.slices.get(dim, [])
        names = [dim, f"{dim}_id" if dim != "month" else "month_key", *FIGURE_COLUMNS]
        return names, [[r.label, r.key, *figure_values(r.figures)] for r in slices]
    if table == "funnels":
        names = ["rate", "dimension", "key", "label", "numerator", "denominator", "value",
                 "low95", "high95", "limit95_low", "limit95_high", "limit998_low",
                 "limit998_high", "flag"]
        rows = []
        for rate_name, per_dim in report.funnels.items():
            for dim, uf in per_dim.items():
                for u in uf.funnel.units:
                    row = uf.rows[str(u.key)]
                    ci = u.rate.interval_95 or (None, None)
                    lim = u.limits
                    rows.append([rate_name, dim, row.key, row.label, u.rate.numerator,
                                 u.rate.denominator, u.rate.value, *ci,
                                 *(lim.limits_95 if lim else (None, None)),
                                 *(lim.limits_99_8 if lim else (None, None)), u.flag or ""])
        return names, rows
    if table == "rework_cost":
        reasons = report.cost.reasons if report.cost is not None else []
        return (["reason", "reworks", "rework_hours", "percent", "cumulative_percent"],
                [[r.reason, r.reworks, r.hours, r.percent, r.cumulative_percent]
                 for r in reasons])
    if table == "machine_time":
        by = report.cost.by if report.cost is not None else {}
        return (["dimension", "key", "name", "first_hours", "first_jobs", "rework_hours",
                 "rework_jobs", "rework_share"],
                [[dim, s.key, s.label, s.time.first_hours, s.time.first_jobs,
                  s.time.rework_hours, s.time.rework_jobs, s.time.rework_share]
                 for dim, slices in by.items() for s in slices])
    if table == "rework_reasons":
        return ["reason", "jobs"], [[r.reason, r.count] for r in report.rework_reasons]
    if table == "rejection_reasons":
        return ["reason", "jobs"], [[r.reason, r.count] for r in report.rejection_reasons]
    if table == "rotors_getting_worse":
        return (["serial_number", "customer", "rotor_type", "latest_job", "received_on",
                 "unit", "initial_amplitudes_oldest_first"],
                [[w.serial_number, w.customer, w.rotor_type, w.job_number, w.received_on,
                  w.unit, " ".join(display.csv_number(a) for a in w.initial_amplitudes)]
                 for w in report.rotors_getting_worse])
    if table == "drift_rotors":
        return (["serial_number", "customer", "rotor_type", "measured_as", "visits",
                 "values_oldest_first", "slope_per_year", "p_value", "mean_interval_days",
                 "rising_beyond_chance"],
                [[d.serial_number, d.customer, d.rotor_type, d.measure, len(d.visits),
                  " ".join(display.csv_number(v) for v in d.values), d.slope_per_year,
                  d.p_value, d.mean_interval_days, d.rising] for d in report.drift.rotors])
    if table == "drift_machines":
        return (["machine", "tests", "latest_on", "latest_umar_gmm", "claim_gmm",
                 "slope_per_year", "p_value", "due_on", "warning"],
                [[m.name, len(m.tests), m.tests[-1].performed_on, m.tests[-1].umar_gmm,
                  m.claim_gmm, None if m.line is None else m.line.slope * 365.25,
                  None if m.line is None else m.line.p_value, m.due_on, m.warning]
                 for m in report.drift.machines])
    return (["machine", "jobs", "runs", "last_verified_on", "due_on", "status"],
            [[m.name, m.jobs, m.runs, m.last_verified_on, m.due_on, m.status]
             for m in report.machines])
