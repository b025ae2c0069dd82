"""How the shop measures read: one text per measure, the headline table with its change words.

The dashboard, its start-page panel and the monthly PDF print the measures through
:func:`measure_text` (numbers through :mod:`shopapp.core.display`), so they agree.
The CSV files keep the raw values (rates as fractions).
"""

from __future__ import annotations

from typing import Any

from shopapp.core.display import NOTHING, fixed, percent
from shopapp.measures.figures import Figures
from shopapp.reports.shop_month import HeadlineRow

# (measure name, label, higher is better?)
HEADLINE_ROWS: tuple[tuple[str, str, bool | None], ...] = (
    ("jobs_received", "Jobs received", None),
    ("jobs_dispatched", "Jobs dispatched", None),
    ("wip_jobs", "Work in progress at the end", None),
    ("wip_age_median_wd", "  its median age, working days", False),
    ("wip_age_max_wd", "  oldest, working days", False),
    ("turnaround_median_wd", "Turnaround, median working days", False),
    ("turnaround_p90_wd", "Turnaround, 90th percentile", False),
    ("promised_hit_rate", "Dispatched by the promised date", True),
    ("reached_in_tolerance", "Jobs that reached tolerance", None),
    ("first_pass_rate", "First-pass rate", True),
    ("correction_cycles_mean", "Mean correction cycles", False),
    ("reworked_jobs", "Reworked jobs (reopened + returns)", False),
    ("rework_rate", "Rework rate", False),
    ("rejected_jobs", "Rejected jobs", False),
)


def measure_text(name: str, value: Any) -> str:
    """A measure as people read it: rates as whole percentages, the mean number of
    correction cycles to two decimals, working days to one, counts as they are."""
    if value is None:
        return NOTHING
    if name.endswith("_rate"):
        return percent(value)
    if name == "correction_cycles_mean":
        return fixed(value, 2)
    if isinstance(value, float):
        return fixed(value, 1)
    return str(value)


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
    size = fixed(abs(delta), 0 if rate or float(delta).is_integer() else 1)
    verdict = ""
    if better_up is not None:
        verdict = " (better)" if (delta > 0) == better_up else " (worse)"
    return f"{word} {size}{unit}{verdict}"


def headline_rows(now: Figures, before: Figures) -> list[HeadlineRow]:
    """The headline table: each measure in this period and the previous one, and the change."""
    a, b = now.as_dict(), before.as_dict()
    return [
        HeadlineRow(name, label, measure_text(name, a[name]), measure_text(name, b[name]),
                    change_text(a[name], b[name], better_up, rate=name.endswith("_rate")))
        for name, label, better_up in HEADLINE_ROWS
    ]
