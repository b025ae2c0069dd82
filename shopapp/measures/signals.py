"""Signal or noise: the statistics the owner's view draws from the period's figures.

No query here: the counts come from the figures already computed in SQL (per slice and
per month), the statistics from :mod:`shopapp.measures.stats`.

- :func:`comparisons`: each rate of the period against the period it is compared with
  (:func:`~shopapp.measures.stats.compare_rates`: the pooled two-proportion z-test, or
  Fisher's exact test when an expected count is below five; p < 0.05 two-sided; five
  jobs at least on each side). Nothing is compared before :data:`MIN_DAYS_TO_COMPARE`
  days of a period in progress have passed.
- :func:`funnels`: rework and first-pass rate of each operator, rotor type, machine and
  customer against its number of jobs, with exact binomial 95 % and 99.8 % limits
  around the shop's rate (:func:`~shopapp.measures.stats.funnel`); a unit with fewer
  than five jobs is never flagged.
- :func:`control_charts`: monthly p-charts of rework and first-pass rate
  (:func:`~shopapp.measures.stats.p_chart`: 3-sigma limits, runs of eight).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from shopapp.core.display import p_text
from shopapp.measures.figures import RATES, Figures, SliceRow
from shopapp.measures.stats import (
    HIGHER_IS_BETTER,
    MIN_JOBS_TO_COMPARE,
    Comparison,
    Funnel,
    PChart,
    compare_rates,
    funnel,
    p_chart,
)

#: A period in progress is not compared before this many days have passed.
MIN_DAYS_TO_COMPARE = 7
#: The rates on funnel plots and control charts, with what their numerator counts.
FUNNEL_RATES: dict[str, tuple[str, str]] = {
    "rework_rate": ("reworked job", "reworked jobs"),
    "first_pass_rate": ("first-time pass", "first-time passes"),
}
FUNNEL_DIMENSIONS: tuple[str, ...] = ("rotor_type", "operator", "machine", "customer")
RATE_LABELS: dict[str, str] = {
    "promised_hit_rate": "dispatched by the promised date",
    "first_pass_rate": "first-pass rate",
    "rework_rate": "rework rate",
    "rejection_rate": "rejection rate",
}
TEST_WORDS = {"z_pooled": "z-test", "fisher_exact": "Fisher's test"}
COMPARISON_RULE = (
    "A rate is called better or worse only when the change is larger than chance explains: "
    "a two-sided two-proportion z-test (\"z-test\"; Fisher's exact test, \"Fisher's test\", "
    "when a count expected under no change is below 5) with p below 0.05, and at least 5 "
    "jobs on each side. Otherwise it says no clear change (or too few jobs) and gives the "
    "counts. Counts and working days carry no better or worse: no test is made for them."
)


@dataclass(frozen=True)
class Change:
    """How one rate moved between the compared periods, in words and as data."""

    name: str
    comparison: Comparison | None  # None: too early in the period to compare
    text: str

    @property
    def verdict(self) -> str:
        return "too early" if self.comparison is None else self.comparison.verdict

    def as_json(self) -> dict[str, Any]:
        out: dict[str, Any] = {"verdict": self.verdict, "text": self.text}
        if self.comparison is not None:
            c = self.comparison
            out.update(test=c.test, p_value=c.p_value, difference=c.difference,
                       before=c.a.as_json(), now=c.b.as_json())
        return out


def _counts(figures: Figures, name: str) -> str:
    r = figures.rate(name)
    return f"{r.numerator} of {r.denominator}"


def change_text(name: str, comparison: Comparison) -> str:
    """'worse: 12 of 40 against 3 of 45 (two-proportion z-test, p = 0.008)' and the like."""
    a, b = comparison.a, comparison.b
    before = f"{a.numerator} of {a.denominator}" if a.denominator else "none"
    counts = f"{b.numerator} of {b.denominator} against {before}"
    if comparison.test is None or comparison.p_value is None:
        if min(a.denominator, b.denominator) == 0:
            return f"nothing to compare: {counts}"
        return f"too few jobs: {counts} (fewer than {MIN_JOBS_TO_COMPARE})"
    tested = f"{TEST_WORDS[comparison.test]}, {p_text(comparison.p_value)}"
    return f"{comparison.verdict}: {counts} ({tested})"


def comparisons(now: Figures, before: Figures, *, elapsed_days: int,
                in_progress: bool) -> dict[str, Change]:
    """Every rate of :data:`~shopapp.measures.figures.RATES`, compared (see module doc)."""
    out: dict[str, Change] = {}
    for name in RATES:
        if in_progress and elapsed_days < MIN_DAYS_TO_COMPARE:
            day_word = "day" if elapsed_days == 1 else "days"
            out[name] = Change(name, None, f"too early: {elapsed_days} {day_word} "
                               f"({_counts(now, name)} so far)")
            continue
        c = compare_rates(before.rate(name), now.rate(name),
                          higher_is_better=HIGHER_IS_BETTER[name])
        out[name] = Change(name, c, change_text(name, c))
    return out


@dataclass(frozen=True)
class UnitFunnel:
    """One funnel plot: a rate by one dimension, and the rows its units come from."""

    rate: str
    dimension: str
    funnel: Funnel
    rows: Mapping[str, SliceRow]  # unit key (funnel key) → its slice row

    def flagged(self) -> list[Any]:
        return [u for u in self.funnel.units if u.flag is not None]


def unit_key(row: SliceRow) -> str:
    """The funnel key of a slice row: its id as text, '' for "not assigned"."""
    return row.key if row.key is not None else ""


def funnels(slices: Mapping[str, Sequence[SliceRow]],
            dimension_words: Mapping[str, str]) -> dict[str, dict[str, UnitFunnel]]:
    """``{rate: {dimension: UnitFunnel}}`` for the rates of :data:`FUNNEL_RATES`.

    The units are the slice rows with at least one job in the rate's denominator; the
    target is the pooled rate of those units, i.e. the shop's (within the scope).
    """
    out: dict[str, dict[str, UnitFunnel]] = {}
    for name, nouns in FUNNEL_RATES.items():
        numerator, denominator = RATES[name]
        per_dim: dict[str, UnitFunnel] = {}
        for dim in FUNNEL_DIMENSIONS:
            rows = [r for r in slices.get(dim, []) if getattr(r.figures, denominator) > 0]
            if not rows:
                continue
            units = [(unit_key(r), f"{dimension_words[dim]} {r.label}",
                      getattr(r.figures, numerator), getattr(r.figures, denominator))
                     for r in rows]
            per_dim[dim] = UnitFunnel(name, dim, funnel(units, nouns=nouns),
                                      {unit_key(r): r for r in rows})
        out[name] = per_dim
    return out


def control_charts(months: Sequence[SliceRow]) -> dict[str, PChart]:
    """Monthly p-charts of the funnel rates (months without jobs are gaps)."""
    out: dict[str, PChart] = {}
    if not months:
        return out
    for name in FUNNEL_RATES:
        numerator, denominator = RATES[name]
        out[name] = p_chart([(r.key or "", getattr(r.figures, numerator),
                              getattr(r.figures, denominator)) for r in months])
    return out
