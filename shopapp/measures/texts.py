"""How the shop measures read: one text per measure, the headline table with its intervals
and change words.

The dashboard, its start-page panel and the monthly PDF print the measures through
:func:`measure_text` (numbers through :mod:`shopapp.core.display`), so they agree.
The CSV files keep the raw values (rates as fractions).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from shopapp.core.display import NOTHING, counted, fixed, number, p_text, percent
from shopapp.measures.costs import ReworkCost
from shopapp.measures.drift import UNIT_TEXT, Drift, MachineDrift, RotorDrift
from shopapp.measures.figures import RATES, REWORK_WINDOW_DAYS, Figures
from shopapp.measures.signals import Change
from shopapp.measures.stats import Rate
from shopapp.reports.shop_month import HeadlineRow, ReasonLine, WorseningRotor

# (measure name, label)
HEADLINE_ROWS: tuple[tuple[str, str], ...] = (
    ("jobs_received", "Jobs received"),
    ("jobs_dispatched", "Jobs dispatched"),
    ("wip_jobs", "Work in progress at the end"),
    ("wip_age_median_wd", "  its median age, working days"),
    ("wip_age_max_wd", "  oldest, working days"),
    ("turnaround_median_wd", "Turnaround, median working days"),
    ("turnaround_p90_wd", "Turnaround, 90th percentile"),
    ("promised_hit_rate", "Dispatched by the promised date"),
    ("reached_in_tolerance", "Jobs that reached tolerance"),
    ("first_pass_rate", "First-pass rate"),
    ("correction_cycles_mean", "Mean correction cycles"),
    ("reworked_jobs", f"  of them reworked within {REWORK_WINDOW_DAYS} days"),
    ("rework_rate", "Rework rate"),
    ("jobs_closed", "Jobs that left the shop"),
    ("rejected_jobs", "  of them rejected"),
    ("rejection_rate", "Rejection rate"),
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


def interval_text(r: Rate) -> str:
    """The 95 % interval of a rate as people read it: ``'10–70 %'`` (a dash without jobs)."""
    if r.interval_95 is None:
        return NOTHING
    low, high = r.interval_95
    return f"{percent(low)[:-2]}–{percent(high)}"


def rate_text(r: Rate) -> str:
    """``'33 % (10–70 %, 2 of 6)'``: the rate, its 95 % interval and its counts."""
    if r.value is None:
        return f"{NOTHING} (0 jobs)"
    return f"{percent(r.value)} ({interval_text(r)}, {r.numerator} of {r.denominator})"


def change_text(now: float | None, before: float | None) -> str:
    """'up 3', 'down 1.5', 'same': the size of a change, with no verdict (no test is made
    for counts and working days; rates go through :mod:`shopapp.measures.signals`)."""
    if now is None or before is None:
        return ""
    delta = now - before
    if abs(delta) < 1e-9:
        return "same"
    word = "up" if delta > 0 else "down"
    if float(delta).is_integer():
        size = fixed(abs(delta), 0)
    elif abs(delta) >= 1:
        size = fixed(abs(delta), 1)
    else:  # two significant figures: 1.25 → 1.1875 is "down 0.062", not "down 0.1"
        size = number(abs(delta), 2, trim=True)
    return f"{word} {size}"


def headline_rows(now: Figures, before: Figures,
                  changes: Mapping[str, Change] | None = None) -> list[HeadlineRow]:
    """The headline table: each measure in this period and the one it is compared with,
    the rates' 95 % intervals, and the change (rates: tested, see ``changes``)."""
    a, b = now.as_dict(), before.as_dict()
    too_early = any(c.comparison is None for c in (changes or {}).values())
    rows = []
    for name, label in HEADLINE_ROWS:
        if name in RATES:
            change = changes[name].text if changes and name in changes else ""
            rows.append(HeadlineRow(name, label, measure_text(name, a[name]),
                                    measure_text(name, b[name]), change,
                                    interval_text(now.rate(name)),
                                    interval_text(before.rate(name))))
        else:
            change = "" if too_early else change_text(a[name], b[name])
            rows.append(HeadlineRow(name, label, measure_text(name, a[name]),
                                    measure_text(name, b[name]), change))
    return rows


# ------------------------------------------------------------------ cost and drift in words
def hours_text(hours: float) -> str:
    """Machine hours as people read them: ``'12.5 h'`` (one decimal; whole above 100)."""
    return f"{fixed(hours, 0 if hours >= 100 else 1)} h"


def cost_summary(cost: ReworkCost, period_words: str) -> str:
    """The machine-time sentence of the period: first-time work, rework, share, money."""
    t = cost.total
    money = ""
    rate = cost.settings.hourly_rate
    if rate is not None and cost.rework_money is not None:
        unit = f" {cost.settings.money_unit}" if cost.settings.money_unit else ""
        money = (f"; at {number(rate, trim=True)}{unit} per machine hour the rework cost "
                 f"{fixed(cost.rework_money, 0)}{unit}")
    share = f" ({percent(t.rework_share)} of the machine time)" if t.rework_share is not None \
        else ""
    per_job = t.first_hours_per_job
    per_job_text = f", {hours_text(per_job)} a job" if per_job is not None else ""
    return (f"Machine time in {period_words}: {hours_text(t.first_hours)} of first-time work on "
            f"{counted(t.first_jobs, 'job')}{per_job_text}, and {hours_text(t.rework_hours)} of "
            f"rework on {counted(t.rework_jobs, 'job')}{share}{money}. Gaps between runs count "
            f"up to {number(cost.settings.idle_minutes, trim=True)} minutes.")


def reason_lines(cost: ReworkCost) -> list[ReasonLine]:
    """The Pareto of rework reasons as printed rows."""
    return [ReasonLine(r.reason, str(r.reworks), fixed(r.hours, 1),
                       percent((r.cumulative_percent or 0.0) / 100.0)) for r in cost.reasons]


def rotor_drift_text(d: RotorDrift) -> str:
    """One rotor's drift in a sentence."""
    unit = "%" if d.measure == "% of limit" else d.unit_text
    values = " → ".join(number(v, trim=True) for v in d.values)
    limit_words = " of its limit" if d.measure == "% of limit" else ""
    verdict = "rising beyond chance" if d.rising else "rising, but chance could explain it"
    return (f"Rotor {d.serial_number} ({d.rotor_type}, {d.customer}): initial unbalance "
            f"{values} {unit}{limit_words} over {len(d.visits)} visits, about "
            f"{number(d.slope_per_year, trim=True)} {unit} a year ({p_text(d.p_value)}, "
            f"{verdict}); a visit every {fixed(d.mean_interval_days, 0)} days on average.")


def machine_drift_text(m: MachineDrift) -> str:
    """One machine's proving tests in a sentence (its warning first)."""
    latest = m.tests[-1]
    claim = f" against a claim of {number(m.claim_gmm, trim=True)} g·mm" \
        if m.claim_gmm is not None else " (no claim recorded)"
    head = f"Machine {m.name}: {m.warning}. " if m.warning else f"Machine {m.name}: "
    return (f"{head}Latest proving test {latest.performed_on.isoformat()}: U_mar "
            f"{number(latest.umar_gmm, trim=True)} g·mm{claim}; {len(m.tests)} tests; next due "
            f"{m.due_on.isoformat() if m.due_on else NOTHING}.")


def drift_lines(drift: Drift, worse: Sequence[WorseningRotor]) -> list[str]:
    """What drifts the wrong way, in sentences: machines with a warning first, then rotors
    rising beyond chance, then rotors that rose at each of their last visits."""
    lines = [machine_drift_text(m) for m in drift.machines if m.warning]
    lines += [rotor_drift_text(d) for d in drift.rotors if d.rising]
    for w in worse:
        steps = " → ".join(number(a, trim=True) for a in w.initial_amplitudes)
        lines.append(f"Rotor {w.serial_number} ({w.rotor_type}, {w.customer}): initial "
                     f"unbalance rose at each of its last {len(w.initial_amplitudes)} visits, "
                     f"{steps} {UNIT_TEXT.get(w.unit, w.unit)}.")
    return lines
