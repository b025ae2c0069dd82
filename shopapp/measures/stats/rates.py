"""Rates with their 95 % Wilson interval, and comparing two rates."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Literal

from scipy import stats

from shopapp.balancing.numtext import p_text
from shopapp.measures.stats.base import (
    _Z95,
    MIN_EXPECTED_COUNT,
    MIN_JOBS_TO_COMPARE,
    StatisticsInputError,
    _open_unit,
    _pair,
    _pair_json,
    _percent,
)

# ---------------------------------------------------------------------- rates


def wilson_interval(
    numerator: int, denominator: int, confidence: float = 0.95
) -> tuple[float, float] | None:
    """Wilson score interval for a binomial proportion.

    With ``x`` events in ``n`` trials, ``p̂ = x/n`` and ``z`` the standard normal
    quantile at ``1 − (1 − confidence)/2`` (1.959964 for 95 %)::

        centre = (p̂ + z²/(2n)) / (1 + z²/n)
        half   = z / (1 + z²/n) · √( p̂(1 − p̂)/n + z²/(4n²) )
        interval = [centre − half, centre + half]

    Source: Wilson, E. B. (1927), "Probable inference, the law of succession,
    and statistical inference", JASA 22:209–212; recommended over the Wald
    interval by Agresti & Coull (1998), The American Statistician 52:119–126.
    Unlike the Wald interval it stays inside [0, 1] and is not zero-width at
    ``x = 0`` or ``x = n``; the ends are clipped to [0, 1] only against rounding.

    Parameters
    ----------
    numerator : int
        Events (jobs reworked, ...), ``0 ≤ numerator ≤ denominator``.
    denominator : int
        Trials (jobs), ``≥ 0``.
    confidence : float, optional
        Coverage, strictly between 0 and 1 (default 0.95).

    Returns
    -------
    tuple of float or None
        ``(low, high)``; ``None`` when ``denominator`` is 0 (no jobs, no interval).

    Raises
    ------
    StatisticsInputError
        Negative or non-integer counts, numerator above denominator, confidence
        outside (0, 1).
    """
    x, n = _pair("", numerator, denominator)
    conf = _open_unit("confidence", confidence)
    if n == 0:
        return None
    z = _Z95 if conf == 0.95 else float(stats.norm.ppf(0.5 + conf / 2.0))
    p = x / n
    z2n = z * z / n
    centre = (p + z2n / 2.0) / (1.0 + z2n)
    half = z / (1.0 + z2n) * math.sqrt(p * (1.0 - p) / n + z2n / (4.0 * n))
    # Exact ends at x = 0 and x = n (centre − half is 0 there in exact arithmetic),
    # and never an end on the wrong side of p̂ through rounding.
    low = 0.0 if x == 0 else min(p, max(0.0, centre - half))
    high = 1.0 if x == n else max(p, min(1.0, centre + half))
    return low, high


@dataclass(frozen=True)
class Rate:
    """A share of jobs: ``numerator`` events out of ``denominator`` jobs.

    ``value`` and ``interval_95`` are derived on construction: ``value`` is
    ``numerator / denominator`` and ``interval_95`` the 95 % Wilson score
    interval (:func:`wilson_interval`); both are ``None`` when the denominator
    is 0, never NaN. Build one with :func:`rate` or ``Rate(numerator,
    denominator)``; bad counts raise :class:`StatisticsInputError`.
    """

    numerator: int
    denominator: int
    value: float | None = field(init=False)
    interval_95: tuple[float, float] | None = field(init=False)

    def __post_init__(self) -> None:
        x, n = _pair("", self.numerator, self.denominator)
        object.__setattr__(self, "numerator", x)
        object.__setattr__(self, "denominator", n)
        object.__setattr__(self, "value", x / n if n else None)
        object.__setattr__(self, "interval_95", wilson_interval(x, n))

    def as_json(self) -> dict[str, Any]:
        """``{"value", "numerator", "denominator", "interval_95": [low, high] | None}``."""
        return {
            "value": self.value,
            "numerator": self.numerator,
            "denominator": self.denominator,
            "interval_95": _pair_json(self.interval_95),
        }


def rate(numerator: int, denominator: int) -> Rate:
    """The share ``numerator / denominator`` with its 95 % Wilson interval.

    Parameters
    ----------
    numerator : int
        Events, ``0 ≤ numerator ≤ denominator``.
    denominator : int
        Jobs, ``≥ 0``; 0 gives ``value = None`` and ``interval_95 = None``.

    Returns
    -------
    Rate

    Raises
    ------
    StatisticsInputError
        Negative or non-integer counts, or numerator above denominator.
    """
    return Rate(numerator, denominator)


# ----------------------------------------------------------------- comparison

Verdict = Literal["better", "worse", "no clear change", "too few jobs"]
TestName = Literal["z_pooled", "fisher_exact"]


@dataclass(frozen=True)
class Comparison:
    """Result of :func:`compare_rates`: how ``b`` stands against ``a``.

    ``verdict`` is ``"better"``/``"worse"`` only when the test's two-sided
    p-value is below ``alpha``; ``"no clear change"`` when it is not;
    ``"too few jobs"`` when no test was run (``test`` and ``p_value`` are then
    ``None``). ``difference`` is ``b.value − a.value`` (``None`` if either has
    no jobs). ``reason`` says the same in plain words.
    """

    a: Rate
    b: Rate
    verdict: Verdict
    p_value: float | None
    test: TestName | None
    difference: float | None
    higher_is_better: bool
    alpha: float
    reason: str

    def as_json(self) -> dict[str, Any]:
        """JSON-ready dict with the two rates nested as :meth:`Rate.as_json`."""
        return {
            "a": self.a.as_json(),
            "b": self.b.as_json(),
            "verdict": self.verdict,
            "p_value": self.p_value,
            "test": self.test,
            "difference": self.difference,
            "higher_is_better": self.higher_is_better,
            "alpha": self.alpha,
            "reason": self.reason,
        }


def _z_pooled_p(x1: int, n1: int, x2: int, n2: int) -> float:
    """Two-sided p of the pooled two-proportion z-test (needs 0 < pooled p < 1)."""
    pooled = (x1 + x2) / (n1 + n2)
    se = math.sqrt(pooled * (1.0 - pooled) * (1.0 / n1 + 1.0 / n2))
    z = (x2 / n2 - x1 / n1) / se
    return float(2.0 * stats.norm.sf(abs(z)))


def compare_rates(
    a: Rate, b: Rate, alpha: float = 0.05, *, higher_is_better: bool
) -> Comparison:
    """Tell whether rate ``b`` is better, worse or not clearly different from ``a``.

    ``a`` is the reference (last period, the rest of the shop) and ``b`` the rate
    judged against it. The null hypothesis is that both share one true rate;
    the test is two-sided.

    1. Either side with fewer than :data:`MIN_JOBS_TO_COMPARE` jobs: no test,
       verdict ``"too few jobs"``.
    2. Expected counts under the pooled rate ``p = (x₁ + x₂)/(n₁ + n₂)``, i.e.
       ``n₁p, n₁(1 − p), n₂p, n₂(1 − p)``, all at least
       :data:`MIN_EXPECTED_COUNT` (Cochran's rule, Cochran 1954, Biometrics
       10:417–451 — from memory): the pooled two-proportion z-test::

           z = (p̂₂ − p̂₁) / √( p(1 − p)(1/n₁ + 1/n₂) ),   p-value = 2·(1 − Φ(|z|))

       (the square root of the 2×2 chi-square test without continuity
       correction; e.g. Fleiss, *Statistical Methods for Rates and
       Proportions* — from memory).
    3. Otherwise Fisher's exact test on the 2×2 table
       ``[[x₁, n₁ − x₁], [x₂, n₂ − x₂]]`` (``scipy.stats.fisher_exact``,
       two-sided: the sum of the hypergeometric probabilities of all tables
       with the same margins that are no more likely than the one observed;
       Fisher 1935, *The Design of Experiments*).

    The verdict is ``"better"`` or ``"worse"`` when the p-value is below
    ``alpha`` and the sign of ``b − a`` is read with ``higher_is_better``
    (see :data:`HIGHER_IS_BETTER`: first-pass up is better, rework, rejection
    and late dispatch up are worse); else ``"no clear change"``.

    Parameters
    ----------
    a, b : Rate
        The reference rate and the rate judged against it.
    alpha : float, optional
        Significance level, strictly between 0 and 1 (default 0.05).
    higher_is_better : bool
        Direction of the measure; keyword-only and required, so a rework rate
        going up is never called "better" by default.

    Returns
    -------
    Comparison

    Raises
    ------
    StatisticsInputError
        ``a`` or ``b`` not a :class:`Rate`, ``alpha`` outside (0, 1),
        ``higher_is_better`` not a bool.
    """
    for name, value in (("a", a), ("b", b)):
        if not isinstance(value, Rate):
            raise StatisticsInputError(name, f"must be a Rate, got {type(value).__name__}")
    level = _open_unit("alpha", alpha)
    if not isinstance(higher_is_better, bool):
        raise StatisticsInputError("higher_is_better", "must be True or False")
    x1, n1, x2, n2 = a.numerator, a.denominator, b.numerator, b.denominator
    difference = None if a.value is None or b.value is None else b.value - a.value

    def result(verdict: Verdict, p: float | None, test: TestName | None, why: str) -> Comparison:
        return Comparison(a, b, verdict, p, test, difference, higher_is_better, level, why)

    if min(n1, n2) < MIN_JOBS_TO_COMPARE:
        return result(
            "too few jobs", None, None,
            f"too few jobs to compare: {n1} against {n2} "
            f"(at least {MIN_JOBS_TO_COMPARE} needed on each side)",
        )
    pooled = (x1 + x2) / (n1 + n2)
    smallest_expected = min(n1, n2) * min(pooled, 1.0 - pooled)
    if smallest_expected >= MIN_EXPECTED_COUNT:
        test: TestName = "z_pooled"
        p_value = _z_pooled_p(x1, n1, x2, n2)
        test_words = "two-proportion z-test"
    else:
        test = "fisher_exact"
        table = [[x1, n1 - x1], [x2, n2 - x2]]
        p_value = float(stats.fisher_exact(table, alternative="two-sided").pvalue)
        test_words = "Fisher's exact test, as the expected counts are small"
    p_value = min(1.0, max(0.0, p_value))
    assert a.value is not None and b.value is not None and difference is not None
    change = f"from {_percent(a.value)} to {_percent(b.value)}"
    tested = f"({test_words}, {p_text(p_value)})"
    if p_value < level and difference != 0.0:
        verdict: Verdict = "better" if (difference > 0.0) == higher_is_better else "worse"
        return result(
            verdict, p_value, test,
            f"{verdict}: the change {change} is larger than chance explains {tested}",
        )
    return result(
        "no clear change", p_value, test,
        f"no clear change: the change {change} could be chance {tested}",
    )


