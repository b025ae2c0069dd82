"""The definitions of the owner's measures in plain words, one place for the page, the
monthly PDF, the JSON and the README.

The precise definitions (for the code) are the docstrings of
:mod:`shopapp.measures.services`, :mod:`shopapp.measures.costs` and
:mod:`shopapp.measures.drift`; these texts say the same for the people who read the
figures. Each is a sentence or two, in the order the dashboard shows the measures.
"""

from __future__ import annotations

from shopapp.measures.figures import REWORK_WINDOW_DAYS
from shopapp.measures.signals import COMPARISON_RULE, MIN_DAYS_TO_COMPARE
from shopapp.measures.stats import CAUTION

DEFINITIONS: dict[str, str] = {
    "period": (
        "A period is whole days, first and last included; times count on their UTC date. "
        "Working days are Monday to Friday. A period still in progress is compared with the "
        "same number of days at the start of the period before (1-15 November against "
        f"1-15 October), and not at all before {MIN_DAYS_TO_COMPARE} days have passed."
    ),
    "first_pass_rate": (
        "First-pass rate: of the jobs that first reached tolerance in the period after at "
        "least one correction, the share whose first check run after the first correction "
        "was within tolerance in every plane."
    ),
    "rework_rate": (
        "Rework rate: of the jobs that first reached tolerance in the period, the share that "
        f"came back to the machine within {REWORK_WINDOW_DAYS} days of it: reopened after "
        "reaching tolerance, being certified or dispatched, or returned by the customer (a "
        "return counts against the job it returns). Rework is counted up to the report's "
        f"date, so the rate of the last {REWORK_WINDOW_DAYS} days may still rise."
    ),
    "promised_hit_rate": (
        "Dispatched by the promised date: of the jobs dispatched in the period that carried "
        "a promised date, the share dispatched on or before it."
    ),
    "rejection_rate": (
        "Rejection rate: of the jobs that left the shop in the period (dispatched or "
        "rejected), the share rejected."
    ),
    "interval_95": (
        "Every rate is shown with its 95 % interval (Wilson score interval): the range of "
        "true rates that fits the counts. Few jobs give a wide range."
    ),
    "comparison": COMPARISON_RULE,
    "funnel": (
        "Funnel plots set each operator's, rotor type's, machine's and customer's rate "
        "against its number of jobs. The lines around the shop's rate are exact binomial "
        "limits: 95 % of units with the shop's true rate fall inside the inner lines and "
        "99.8 % inside the outer ones. A unit outside the outer lines is named; one with "
        "fewer than 5 jobs is never flagged."
    ),
    "control_chart": (
        "Control charts (p-charts) show each month's rate against the rate of the whole "
        "span and limits at 3 standard errors for the month's number of jobs. Marked: "
        "months outside the limits, and runs of 8 or more months in a row on one side."
    ),
    "machine_time": (
        "Machine time: the time between consecutive runs of a job, each gap counted up to "
        "the shop's idle time (longer gaps count as the idle time); the time after the last "
        "run is not known and not counted. Runs after a reopening and all runs of a return "
        "job are rework; the gap across a reopening is not counted. Money is rework hours "
        "times the shop's machine-hour rate."
    ),
    "drift": (
        "Drift: a rotor's initial unbalance at each of its last visits, as % of the job's "
        "limit where the machine reads g-mm (else in the machine's unit), with the slope of "
        "the least-squares line and its p-value; rising beyond chance when the slope is "
        "positive with p below 0.05. A machine's proving tests (U_mar) are set against its "
        "claim, with a warning when the line through them reaches the claim by the next "
        "due date."
    ),
    "caution": CAUTION,
}
