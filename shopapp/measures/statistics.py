"""Statistics that tell signal from noise in the shop's measures (issue 17).

A pure module: plain numbers in, plain numbers (and JSON-ready dicts) out. No
database, no web, no files; numpy and scipy only. The database side collects the
counts (jobs reworked out of jobs finished, per operator, month, rotor type ...)
and hands them here.

What is here
------------
* :class:`Rate` / :func:`rate` — a share with its 95 % Wilson score interval.
* :func:`compare_rates` — did a rate get better or worse between two periods (or
  two slices)? Two-proportion z-test, Fisher's exact test for small expected
  counts, and a refusal for tiny samples.
* :func:`funnel` / :func:`funnel_curve` — funnel plot: each unit's rate against
  exact binomial control limits around the overall rate.
* :func:`p_chart` — monthly p-chart with 3-sigma limits and a run rule.
* :func:`trend` — least-squares line through a series, its slope's standard
  error and p-value, and whether the line reaches a limit before a given x.
* :func:`machine_time` — machine time of a job visit from its run timestamps.
* :func:`pareto` — counts sorted with cumulative percentages.
* :data:`CAUTION` — the sentence every page and PDF shows beside flags.

Every function checks its input and raises :class:`StatisticsInputError` (a
``ValueError``) naming the offending field; no result is ever NaN or infinite:
a share over zero jobs is ``None``.
"""

from __future__ import annotations

import datetime as dt
import math
import operator
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Literal

import numpy as np
from scipy import stats

__all__ = [
    "CAUTION",
    "DEFAULT_IDLE_SECONDS",
    "FLAG_LEVEL",
    "HIGHER_IS_BETTER",
    "MIN_EXPECTED_COUNT",
    "MIN_FUNNEL_JOBS",
    "MIN_JOBS_TO_COMPARE",
    "RUN_LENGTH",
    "Comparison",
    "Funnel",
    "FunnelLimits",
    "FunnelUnit",
    "MachineTime",
    "PChart",
    "PChartPoint",
    "ParetoItem",
    "Rate",
    "RunOnOneSide",
    "StatisticsInputError",
    "Trend",
    "compare_rates",
    "funnel",
    "funnel_curve",
    "funnel_limits",
    "machine_time",
    "p_chart",
    "pareto",
    "rate",
    "trend",
    "wilson_interval",
]

#: The one sentence the owner's page and the PDF show beside every flag.
CAUTION = (
    "A flagged unit is a question to look into, not a verdict on a person: "
    "chance alone rarely puts a figure outside these limits, but causes other than "
    "the person's work (the mix of rotors, a machine, a customer) often do."
)

#: Whether a higher value is the better one, per shop measure (the direction flag
#: that :func:`compare_rates` needs). Keys are the rate names of
#: ``shopapp.services.measures``; ``rejection_rate`` and ``late_rate`` are the
#: shares of jobs rejected and dispatched after their promised date.
HIGHER_IS_BETTER: Mapping[str, bool] = MappingProxyType(
    {
        "first_pass_rate": True,
        "promised_hit_rate": True,
        "rework_rate": False,
        "rejection_rate": False,
        "late_rate": False,
    }
)

#: Fewest jobs on each side before :func:`compare_rates` calls any change.
MIN_JOBS_TO_COMPARE = 5
#: Below this smallest expected cell count the z-test gives way to Fisher's exact
#: test (Cochran's rule, Cochran 1954 — from memory).
MIN_EXPECTED_COUNT = 5.0
#: Units with fewer jobs than this are never flagged on a funnel plot.
MIN_FUNNEL_JOBS = 5
#: Coverage of the funnel limits that flag a unit (99.8 %: 0.1 % in each tail).
FLAG_LEVEL = 0.998
#: Coverage of the inner, warning-only funnel limits.
WARNING_LEVEL = 0.95
#: Points in a row on one side of the p-chart's centre line that make a run.
RUN_LENGTH = 8
#: Gaps between runs longer than this (seconds) count only up to it (30 minutes).
DEFAULT_IDLE_SECONDS = 30.0 * 60.0
#: Most limit points :func:`funnel_curve` returns in one call.
MAX_CURVE_POINTS = 100_000

_Z95 = float(stats.norm.ppf(0.975))

Side = Literal["above", "below"]
Key = str | int


class StatisticsInputError(ValueError):
    """Bad input to a statistics function.

    Carries the name of the offending field so the page or CLI can put the
    message beside the right input.

    Parameters
    ----------
    field : str
        Name of the input field as the caller spelled it (``"denominator"``,
        ``"units[2].numerator"``).
    message : str
        Plain-language reason.
    """

    def __init__(self, field: str, message: str) -> None:
        super().__init__(f"{field}: {message}")
        self.field = field
        self.message = message


# --------------------------------------------------------------------- checks


def _count(name: str, value: Any) -> int:
    """Return ``value`` as a non-negative int, refusing floats, bools and negatives."""
    if isinstance(value, bool):
        raise StatisticsInputError(name, f"must be a whole number, got {value!r}")
    try:
        out = operator.index(value)
    except TypeError:
        raise StatisticsInputError(name, f"must be a whole number, got {value!r}") from None
    if out < 0:
        raise StatisticsInputError(name, f"must not be negative, got {out}")
    return out


def _pair(prefix: str, numerator: Any, denominator: Any) -> tuple[int, int]:
    """Check a numerator/denominator pair of counts; field names get ``prefix``."""
    x = _count(f"{prefix}numerator", numerator)
    n = _count(f"{prefix}denominator", denominator)
    if x > n:
        raise StatisticsInputError(
            f"{prefix}numerator", f"{x} is more than the denominator {n}"
        )
    return x, n


def _real(name: str, value: Any) -> float:
    """Return ``value`` as a finite float, refusing bools, NaN and infinity."""
    if isinstance(value, bool):
        raise StatisticsInputError(name, f"must be a number, got {value!r}")
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise StatisticsInputError(name, f"must be a number, got {value!r}") from None
    if not math.isfinite(out):
        raise StatisticsInputError(name, f"must be a finite number, got {value!r}")
    return out


def _proportion(name: str, value: Any) -> float:
    out = _real(name, value)
    if not 0.0 <= out <= 1.0:
        raise StatisticsInputError(name, f"must lie between 0 and 1, got {out:g}")
    return out


def _open_unit(name: str, value: Any) -> float:
    out = _real(name, value)
    if not 0.0 < out < 1.0:
        raise StatisticsInputError(name, f"must lie strictly between 0 and 1, got {out:g}")
    return out


def _nonempty(name: str, values: Any) -> Sequence[Any]:
    if isinstance(values, str | bytes) or not isinstance(values, Sequence):
        raise StatisticsInputError(name, "must be a list")
    if len(values) == 0:
        raise StatisticsInputError(name, "must not be empty")
    return values


def _percent(value: float) -> str:
    return f"{100.0 * value:.1f} %"


def _pair_json(pair: tuple[float, float] | None) -> list[float] | None:
    return None if pair is None else [float(pair[0]), float(pair[1])]


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
    tested = f"({test_words}, p = {p_value:.3g})"
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


# --------------------------------------------------------------------- funnel


@dataclass(frozen=True)
class FunnelLimits:
    """Funnel control limits for ``n`` jobs around one target rate.

    ``counts_95`` and ``counts_99_8`` are the limits on the count of events,
    ``(low, high)``; ``limits_95`` and ``limits_99_8`` the same divided by
    ``n``, as rates. A count strictly outside ``counts_99_8`` is flagged. See
    :func:`funnel_limits`.
    """

    n: int
    counts_95: tuple[int, int]
    counts_99_8: tuple[int, int]

    @property
    def limits_95(self) -> tuple[float, float]:
        """Inner (warning) limits as rates."""
        return self.counts_95[0] / self.n, self.counts_95[1] / self.n

    @property
    def limits_99_8(self) -> tuple[float, float]:
        """Outer (flagging) limits as rates."""
        return self.counts_99_8[0] / self.n, self.counts_99_8[1] / self.n

    def as_json(self) -> dict[str, Any]:
        """``{"n", "limits_95": [low, high], "limits_99_8": [low, high], "counts_99_8": [..]}``."""
        return {
            "n": self.n,
            "limits_95": _pair_json(self.limits_95),
            "limits_99_8": _pair_json(self.limits_99_8),
            "counts_99_8": list(self.counts_99_8),
        }


def _count_limits(target: float, n: np.ndarray, coverage: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact binomial limits on the count: ppf at (1 − c)/2 and (1 + c)/2."""
    tail = (1.0 - coverage) / 2.0
    low = stats.binom.ppf(tail, n, target)
    high = stats.binom.ppf(1.0 - tail, n, target)
    return np.asarray(low, dtype=float), np.asarray(high, dtype=float)


def _limits_for(target: float, ns: np.ndarray) -> list[FunnelLimits]:
    lo95, hi95 = _count_limits(target, ns, WARNING_LEVEL)
    lo998, hi998 = _count_limits(target, ns, FLAG_LEVEL)
    return [
        FunnelLimits(
            int(n), (int(lo95[i]), int(hi95[i])), (int(lo998[i]), int(hi998[i]))
        )
        for i, n in enumerate(ns)
    ]


def funnel_limits(target: float, n: int) -> FunnelLimits:
    """Exact binomial funnel limits for one unit of ``n`` jobs.

    With ``X ~ Binomial(n, target)`` and ``Q(q)`` its quantile — the smallest
    count ``k`` with ``P(X ≤ k) ≥ q`` (``scipy.stats.binom.ppf``) — the limits
    on the rate for coverage ``c`` are::

        low  = Q((1 − c)/2) / n,   high = Q((1 + c)/2) / n

    for ``c`` = 95 % (warning) and 99.8 % (flag). Source: the exact binomial
    funnel limits of Spiegelhalter, D. J. (2005), "Funnel plots for comparing
    institutional performance", Statistics in Medicine 24:1185–1202 — from
    memory.

    Spiegelhalter also interpolates between neighbouring counts to draw smooth
    lines; that is deliberately **not** done here. Without interpolation a count
    ``x`` is outside the limits exactly when ``x > Q((1 + c)/2)`` or
    ``x < Q((1 − c)/2)``, which by the definition of ``Q`` has probability at
    most ``(1 − c)/2`` in each tail under the target rate — the flag is never
    more eager than its stated level — and a point drawn outside its line is
    always a flagged point (interpolated lines lie inside the count limits, so
    an unflagged point could be drawn outside them). The price is a slightly
    conservative level and jagged lines; draw them as given, point by point.

    Parameters
    ----------
    target : float
        The rate the units are compared with, in [0, 1].
    n : int
        Jobs of the unit, ``≥ 1``.

    Returns
    -------
    FunnelLimits

    Raises
    ------
    StatisticsInputError
        ``target`` outside [0, 1] or not finite; ``n`` below 1 or not whole.
    """
    p = _proportion("target", target)
    jobs = _count("n", n)
    if jobs < 1:
        raise StatisticsInputError("n", "must be at least 1")
    return _limits_for(p, np.array([jobs]))[0]


def funnel_curve(target: float, n_max: int, *, n_min: int = 1) -> tuple[FunnelLimits, ...]:
    """Funnel limit lines for drawing: :func:`funnel_limits` at every ``n``.

    Parameters
    ----------
    target : float
        The rate the units are compared with, in [0, 1].
    n_max : int
        Largest number of jobs on the x axis.
    n_min : int, optional
        Smallest number of jobs (default 1).

    Returns
    -------
    tuple of FunnelLimits
        One per whole ``n`` from ``n_min`` to ``n_max``; the lines are exact
        binomial limits without interpolation, so they step.

    Raises
    ------
    StatisticsInputError
        ``target`` outside [0, 1]; ``n_min`` below 1; ``n_max`` below ``n_min``;
        more than :data:`MAX_CURVE_POINTS` points.
    """
    p = _proportion("target", target)
    lo = _count("n_min", n_min)
    hi = _count("n_max", n_max)
    if lo < 1:
        raise StatisticsInputError("n_min", "must be at least 1")
    if hi < lo:
        raise StatisticsInputError("n_max", f"must not be below n_min ({lo}), got {hi}")
    if hi - lo + 1 > MAX_CURVE_POINTS:
        raise StatisticsInputError(
            "n_max", f"at most {MAX_CURVE_POINTS} points per curve, asked {hi - lo + 1}"
        )
    return tuple(_limits_for(p, np.arange(lo, hi + 1)))


@dataclass(frozen=True)
class FunnelUnit:
    """One unit (operator, machine, rotor type, customer) on a funnel plot.

    ``limits`` is ``None`` when the unit has no jobs or there is no target
    rate. ``flag`` is ``"above"``/``"below"`` when the count lies outside the
    99.8 % limits and the unit has at least ``min_jobs`` jobs, else ``None``.
    """

    key: Key
    label: str
    rate: Rate
    limits: FunnelLimits | None
    flag: Side | None
    sentence: str

    def as_json(self) -> dict[str, Any]:
        """``{"key", "label", "rate", "limits_95", "limits_99_8", "flag", "sentence"}``."""
        return {
            "key": self.key,
            "label": self.label,
            "rate": self.rate.as_json(),
            "limits_95": None if self.limits is None else _pair_json(self.limits.limits_95),
            "limits_99_8": None if self.limits is None else _pair_json(self.limits.limits_99_8),
            "flag": self.flag,
            "sentence": self.sentence,
        }


@dataclass(frozen=True)
class Funnel:
    """Result of :func:`funnel`.

    ``overall`` pools all units' counts; ``target`` is the rate the limits are
    drawn around (the ``overall_p`` given, else ``overall.value``; ``None`` when
    no unit has jobs and none was given).
    """

    overall: Rate
    target: float | None
    units: tuple[FunnelUnit, ...]
    min_jobs: int
    flag_level: float = FLAG_LEVEL

    def as_json(self) -> dict[str, Any]:
        """``{"overall": Rate, "target", "flag_level", "min_jobs", "caution", "units": [...]}``.

        Each unit is :meth:`FunnelUnit.as_json`; ``overall`` is :meth:`Rate.as_json`.
        """
        return {
            "overall": self.overall.as_json(),
            "target": self.target,
            "flag_level": self.flag_level,
            "min_jobs": self.min_jobs,
            "caution": CAUTION,
            "units": [u.as_json() for u in self.units],
        }


def _jobs(n: int) -> str:
    return "1 job" if n == 1 else f"{n} jobs"


def funnel(
    units: Sequence[tuple[Key, str, int, int]],
    overall_p: float | None = None,
    *,
    nouns: tuple[str, str] = ("event", "events"),
    min_jobs: int = MIN_FUNNEL_JOBS,
) -> Funnel:
    """Funnel plot: which units' rates lie outside what chance explains.

    The target rate is ``overall_p`` when given, else the pooled rate
    ``Σxᵢ / Σnᵢ`` of all units. Each unit with ``n ≥ 1`` jobs gets the exact
    binomial limits of :func:`funnel_limits` (95 % and 99.8 %, no
    interpolation). A unit is flagged ``"above"`` when its count ``x`` exceeds
    the 99.8 % upper count limit and ``"below"`` when it falls short of the
    lower one — at most 0.1 % chance in each tail for a unit whose true rate is
    the target (Spiegelhalter 2005, Statistics in Medicine 24:1185–1202, uses
    the same 99.8 % level as its outer limits — from memory). Units with fewer
    than ``min_jobs`` jobs are never flagged: their limits are so wide that a
    flag would say nothing, and a flag on three jobs reads as a verdict.

    Parameters
    ----------
    units : sequence of (key, label, numerator, denominator)
        ``key`` (str or int) must be unique; ``label`` is what the sentence
        names ("operator A. Smith", "rotor type TFB-CF-1250").
    overall_p : float, optional
        Target rate in [0, 1] (e.g. the whole shop's rate when ``units`` is a
        subset); default the pooled rate of ``units``.
    nouns : (str, str), optional
        Singular and plural of what the numerator counts, for the sentences
        (``("rework", "reworks")``).
    min_jobs : int, optional
        Fewest jobs for a flag (default :data:`MIN_FUNNEL_JOBS` = 5).

    Returns
    -------
    Funnel
        Each unit's ``sentence`` reads e.g. "rotor type TFB-CF-1250: 7 reworks
        in 30 jobs, above what chance explains".

    Raises
    ------
    StatisticsInputError
        Empty ``units``; a unit not a 4-tuple; repeated key; bad counts;
        ``overall_p`` outside [0, 1]; ``min_jobs`` below 1; bad ``nouns``.
    """
    rows = _nonempty("units", units)
    target_given = None if overall_p is None else _proportion("overall_p", overall_p)
    floor = _count("min_jobs", min_jobs)
    if floor < 1:
        raise StatisticsInputError("min_jobs", "must be at least 1")
    if (
        not isinstance(nouns, tuple)
        or len(nouns) != 2
        or not all(isinstance(w, str) and w for w in nouns)
    ):
        raise StatisticsInputError("nouns", "give (singular, plural), two non-empty words")
    parsed: list[tuple[Key, str, int, int]] = []
    seen: set[Key] = set()
    for i, row in enumerate(rows):
        where = f"units[{i}]"
        if not isinstance(row, tuple | list) or len(row) != 4:
            raise StatisticsInputError(where, "must be (key, label, numerator, denominator)")
        key, label, num, den = row
        if isinstance(key, bool) or not isinstance(key, str | int):
            raise StatisticsInputError(f"{where}.key", "must be a string or an integer")
        if key in seen:
            raise StatisticsInputError(f"{where}.key", f"{key!r} appears more than once")
        seen.add(key)
        if not isinstance(label, str):
            raise StatisticsInputError(f"{where}.label", "must be a string")
        x, n = _pair(f"{where}.", num, den)
        parsed.append((key, label, x, n))

    overall = Rate(sum(r[2] for r in parsed), sum(r[3] for r in parsed))
    target = target_given if target_given is not None else overall.value
    with_jobs = np.array(sorted({n for *_, n in parsed if n > 0}), dtype=int)
    limits_by_n = (
        {lim.n: lim for lim in _limits_for(target, with_jobs)}
        if target is not None and with_jobs.size
        else {}
    )
    out: list[FunnelUnit] = []
    for key, label, x, n in parsed:
        lim = limits_by_n.get(n)
        flag: Side | None = None
        counted = f"{label}: {x} {nouns[0] if x == 1 else nouns[1]} in {_jobs(n)}"
        if n == 0:
            sentence = f"{label}: no jobs"
        elif lim is None:
            sentence = f"{counted}, no overall rate to compare with"
        elif n < floor:
            sentence = f"{counted}, too few jobs to judge (fewer than {floor})"
        else:
            low, high = lim.counts_99_8
            if x > high:
                flag = "above"
            elif x < low:
                flag = "below"
            where_words = {
                "above": "above what chance explains",
                "below": "below what chance explains",
                None: "within what chance explains",
            }[flag]
            sentence = f"{counted}, {where_words}"
        out.append(FunnelUnit(key, label, Rate(x, n), lim, flag, sentence))
    return Funnel(overall, target, tuple(out), floor)


# -------------------------------------------------------------------- p-chart


@dataclass(frozen=True)
class PChartPoint:
    """One month on a p-chart. ``lcl``/``ucl`` are ``None`` for a month without jobs."""

    label: str
    rate: Rate
    lcl: float | None
    ucl: float | None
    outside: Side | None
    in_run: bool

    def as_json(self) -> dict[str, Any]:
        """``{"label", "rate", "lcl", "ucl", "outside", "in_run"}``."""
        return {
            "label": self.label,
            "rate": self.rate.as_json(),
            "lcl": self.lcl,
            "ucl": self.ucl,
            "outside": self.outside,
            "in_run": self.in_run,
        }


@dataclass(frozen=True)
class RunOnOneSide:
    """A run of points on one side of the centre line: indices into the months."""

    side: Side
    first: int
    last: int
    length: int

    def as_json(self) -> dict[str, Any]:
        """``{"side", "first", "last", "length"}``; first/last index the months given."""
        return {"side": self.side, "first": self.first, "last": self.last, "length": self.length}


@dataclass(frozen=True)
class PChart:
    """Result of :func:`p_chart`. ``centre`` is ``None`` when no month has jobs."""

    centre: float | None
    points: tuple[PChartPoint, ...]
    runs: tuple[RunOnOneSide, ...]
    run_length: int

    def as_json(self) -> dict[str, Any]:
        """JSON-ready dict: centre, run_length, points, runs and :data:`CAUTION`."""
        return {
            "centre": self.centre,
            "run_length": self.run_length,
            "caution": CAUTION,
            "points": [p.as_json() for p in self.points],
            "runs": [r.as_json() for r in self.runs],
        }


def p_chart(
    months: Sequence[tuple[str, int, int]], *, run_length: int = RUN_LENGTH
) -> PChart:
    """p-chart (control chart for a share) over months, with a run rule.

    Centre line, the pooled rate over all months, and per-month 3-sigma limits
    (Shewhart's p-chart with variable sample size; Montgomery, *Introduction to
    Statistical Quality Control*, ch. on control charts for attributes — from
    memory)::

        p̄ = Σxᵢ / Σnᵢ,   LCLᵢ, UCLᵢ = p̄ ∓ 3·√( p̄(1 − p̄) / nᵢ ),  clipped to [0, 1]

    A month is ``outside`` when its rate is strictly above UCL or below LCL.
    Limits and centre come from the same months (a "phase I" chart), so a
    long drift partly hides itself in p̄; the run rule catches what it leaves.

    Run rule: ``run_length`` (default 8) or more consecutive points strictly on
    one side of the centre line — the Western Electric handbook's "eight in a
    row" rule (Western Electric, *Statistical Quality Control Handbook*, 1956;
    Nelson's 1984 rule 2 uses nine — both from memory). A point exactly on the
    centre line ends a run; a month without jobs is no point and neither ends
    nor extends a run. Each maximal run is reported once and its points get
    ``in_run = True``.

    The 3-sigma limits lean on the normal approximation, which is rough when
    ``nᵢ·p̄`` is small; for few jobs per month prefer :func:`funnel`.

    Parameters
    ----------
    months : sequence of (label, numerator, denominator)
        In time order.
    run_length : int, optional
        Points in a row that make a run, ≥ 2 (default :data:`RUN_LENGTH`).

    Returns
    -------
    PChart

    Raises
    ------
    StatisticsInputError
        Empty ``months``, a month not a 3-tuple, bad counts, bad ``run_length``.
    """
    rows = _nonempty("months", months)
    length = _count("run_length", run_length)
    if length < 2:
        raise StatisticsInputError("run_length", "must be at least 2")
    parsed: list[tuple[str, int, int]] = []
    for i, row in enumerate(rows):
        where = f"months[{i}]"
        if not isinstance(row, tuple | list) or len(row) != 3:
            raise StatisticsInputError(where, "must be (label, numerator, denominator)")
        label, num, den = row
        if not isinstance(label, str):
            raise StatisticsInputError(f"{where}.label", "must be a string")
        x, n = _pair(f"{where}.", num, den)
        parsed.append((label, x, n))

    total_x = sum(x for _, x, _ in parsed)
    total_n = sum(n for _, _, n in parsed)
    centre = total_x / total_n if total_n else None

    rates = [Rate(x, n) for _, x, n in parsed]
    limits: list[tuple[float | None, float | None]] = []
    sides: list[Side | None] = []
    outside: list[Side | None] = []
    for r in rates:
        if centre is None or r.value is None:
            limits.append((None, None))
            sides.append(None)
            outside.append(None)
            continue
        half = 3.0 * math.sqrt(centre * (1.0 - centre) / r.denominator)
        lcl, ucl = max(0.0, centre - half), min(1.0, centre + half)
        limits.append((lcl, ucl))
        sides.append("above" if r.value > centre else "below" if r.value < centre else None)
        outside.append("above" if r.value > ucl else "below" if r.value < lcl else None)

    runs: list[RunOnOneSide] = []
    current: list[int] = []
    current_side: Side | None = None

    def close() -> None:
        if current_side is not None and len(current) >= length:
            runs.append(RunOnOneSide(current_side, current[0], current[-1], len(current)))

    for i, r in enumerate(rates):
        if r.value is None or centre is None:
            continue  # a month without jobs is no point
        side = sides[i]
        if side is not None and side == current_side:
            current.append(i)
            continue
        close()
        current, current_side = ([i], side) if side is not None else ([], None)
    close()
    in_run = {i for run in runs for i in range(run.first, run.last + 1)}

    points = tuple(
        PChartPoint(
            label, rates[i], limits[i][0], limits[i][1], outside[i],
            i in in_run and rates[i].value is not None,
        )
        for i, (label, _, _) in enumerate(parsed)
    )
    return PChart(centre, points, tuple(runs), length)


# ---------------------------------------------------------------------- trend


@dataclass(frozen=True)
class Trend:
    """Least-squares line ``y = intercept + slope·x`` through a series.

    See :func:`trend` for the formulas. ``x_first``/``x_last`` are the smallest
    and largest x of the data.
    """

    slope: float
    intercept: float
    slope_stderr: float
    p_value: float
    n: int
    x_first: float
    x_last: float

    def value_at(self, x: float) -> float:
        """Fitted value ``intercept + slope·x``."""
        return self.intercept + self.slope * _real("x", x)

    def crossing_x(self, limit: float) -> float | None:
        """The x where the fitted line meets ``limit``: ``(limit − intercept) / slope``.

        ``None`` for a flat line (slope 0), which meets the limit nowhere or
        everywhere.
        """
        level = _real("limit", limit)
        if self.slope == 0.0:
            return None
        out = (level - self.intercept) / self.slope
        return out if math.isfinite(out) else None

    def crosses(self, limit: float, before_x: float) -> bool:
        """Whether the fitted line, carried on past the data, reaches ``limit`` by ``before_x``.

        True when the line's values at ``x_last`` and ``before_x`` lie on
        different sides of ``limit`` or either equals it, i.e. the crossing x of
        :meth:`crossing_x` lies in ``[x_last, before_x]``. A line already past
        the limit at ``x_last`` does not cross it again: check the latest value
        (or :meth:`value_at`) for that. This is the fitted line only, with no
        prediction band; read it together with ``p_value``.

        Parameters
        ----------
        limit : float
            The level (a machine's claimed minimum residual unbalance, ...).
        before_x : float
            The x to look ahead to (the next due date as a day number), not
            before ``x_last``.

        Raises
        ------
        StatisticsInputError
            Non-finite ``limit``/``before_x``; ``before_x`` before ``x_last``.
        """
        level = _real("limit", limit)
        until = _real("before_x", before_x)
        if until < self.x_last:
            raise StatisticsInputError(
                "before_x", f"must not lie before the last data point ({self.x_last:g})"
            )
        start = self.value_at(self.x_last) - level
        end = self.value_at(until) - level
        return start == 0.0 or end == 0.0 or (start < 0.0) != (end < 0.0)

    def as_json(self) -> dict[str, Any]:
        """``{"slope", "intercept", "slope_stderr", "p_value", "n", "x_first", "x_last"}``."""
        return {
            "slope": self.slope,
            "intercept": self.intercept,
            "slope_stderr": self.slope_stderr,
            "p_value": self.p_value,
            "n": self.n,
            "x_first": self.x_first,
            "x_last": self.x_last,
        }


def _series(name: str, values: Any) -> np.ndarray:
    seq = _nonempty(name, values)
    return np.array([_real(f"{name}[{i}]", v) for i, v in enumerate(seq)], dtype=float)


def trend(xs: Sequence[float], ys: Sequence[float]) -> Trend:
    """Ordinary least-squares line through ``(xs, ys)`` and the test of its slope.

    With ``x̄, ȳ`` the means, ``Sxx = Σ(x − x̄)²``, ``Sxy = Σ(x − x̄)(y − ȳ)``::

        slope b = Sxy / Sxx,   intercept a = ȳ − b·x̄
        s² = Σ(y − a − b·x)² / (n − 2),   SE(b) = √(s² / Sxx)
        t = b / SE(b),   p-value = 2·P(T_{n−2} > |t|)

    (the textbook simple linear regression; e.g. Draper & Smith, *Applied
    Regression Analysis*, ch. 1 — from memory). The p-value tests "no trend"
    (slope 0), two-sided. For a perfect fit (``s² = 0``) the p-value is 0 for a
    sloped line and 1 for a flat one instead of the undefined ``0/0``.

    Dates go in as numbers (e.g. ``date.toordinal()`` for days); the slope is
    then per day.

    Parameters
    ----------
    xs, ys : sequence of float
        Same length, at least 3 points (two points always fit exactly and leave
        no error estimate), xs not all equal; finite numbers.

    Returns
    -------
    Trend

    Raises
    ------
    StatisticsInputError
        Empty or too short series, lengths that differ, non-numbers, NaN or
        infinity, all xs equal.
    """
    x = _series("xs", xs)
    y = _series("ys", ys)
    if y.size != x.size:
        raise StatisticsInputError("ys", f"has {y.size} values but xs has {x.size}")
    n = int(x.size)
    if n < 3:
        raise StatisticsInputError("xs", f"need at least 3 points for a trend, got {n}")
    with np.errstate(all="ignore"):  # overflow is caught below, as a field error
        dx = x - x.mean()
        sxx = float(dx @ dx)
        if sxx == 0.0:
            raise StatisticsInputError("xs", "all x values are equal; no slope can be fitted")
        if not math.isfinite(sxx):
            raise StatisticsInputError("xs", "values too large to fit a line")
        slope = float(dx @ (y - y.mean())) / sxx
        intercept = float(y.mean()) - slope * float(x.mean())
        residuals = y - (intercept + slope * x)
        s2 = float(residuals @ residuals) / (n - 2)
        stderr = math.sqrt(s2 / sxx) if math.isfinite(s2) else math.inf
    if not (math.isfinite(slope) and math.isfinite(intercept) and math.isfinite(stderr)):
        raise StatisticsInputError("ys", "values too large to fit a line")
    if stderr > 0.0:
        p_value = float(2.0 * stats.t.sf(abs(slope / stderr), n - 2))
    else:
        p_value = 0.0 if slope != 0.0 else 1.0
    return Trend(slope, intercept, stderr, p_value, n, float(x.min()), float(x.max()))


# --------------------------------------------------------------- machine time


@dataclass(frozen=True)
class MachineTime:
    """Result of :func:`machine_time`: seconds counted and gaps cut to the threshold."""

    seconds: float
    runs: int
    gaps_cut: int
    idle_threshold_seconds: float

    def as_json(self) -> dict[str, Any]:
        """``{"seconds", "runs", "gaps_cut", "idle_threshold_seconds"}``."""
        return {
            "seconds": self.seconds,
            "runs": self.runs,
            "gaps_cut": self.gaps_cut,
            "idle_threshold_seconds": self.idle_threshold_seconds,
        }


def _seconds_of(run_times: Sequence[Any]) -> list[float]:
    if isinstance(run_times, str | bytes) or not isinstance(run_times, Sequence):
        raise StatisticsInputError("run_times", "must be a list")
    if not run_times:
        return []
    if all(isinstance(t, dt.datetime) for t in run_times):
        aware = {t.tzinfo is not None and t.utcoffset() is not None for t in run_times}
        if len(aware) > 1:
            raise StatisticsInputError(
                "run_times", "mixes times with and without a time zone"
            )
        first = run_times[0]
        return [(t - first).total_seconds() for t in run_times]
    if any(isinstance(t, dt.date) for t in run_times):
        raise StatisticsInputError(
            "run_times", "give all datetimes or all seconds, not dates or a mix"
        )
    return [_real(f"run_times[{i}]", t) for i, t in enumerate(run_times)]


def machine_time(
    run_times: Sequence[dt.datetime] | Sequence[float],
    idle_threshold: dt.timedelta | float = DEFAULT_IDLE_SECONDS,
) -> MachineTime:
    """Machine time of one job visit from the timestamps of its runs.

    The runs are put in time order; the machine time is the sum of the gaps
    between consecutive runs, each gap cut to the idle threshold::

        T = Σ min(tᵢ₊₁ − tᵢ, threshold)

    A gap longer than the threshold (lunch, another job in between) counts as
    the threshold, not as 0. Two reasons: the work right before a break
    (correcting, the next spin-up) did happen, and counting 0 would make the
    total jump by a whole threshold when a gap grows by one second past it;
    capping keeps the total continuous in every timestamp. The time after the
    last run's timestamp is not known and not counted, so a visit with one run
    has 0 s. (Definition chosen here, no source.)

    Parameters
    ----------
    run_times : sequence of datetime, or sequence of float
        Timestamps of the visit's runs: all datetimes (all with or all without
        a time zone) or all seconds. Empty or one run gives 0 s.
    idle_threshold : timedelta or float, optional
        Longest gap counted in full, > 0 (seconds if a number; default
        :data:`DEFAULT_IDLE_SECONDS`, 30 minutes).

    Returns
    -------
    MachineTime

    Raises
    ------
    StatisticsInputError
        Not a list, mixed kinds, NaN/infinite seconds, threshold not > 0.
    """
    if isinstance(idle_threshold, dt.timedelta):
        threshold = idle_threshold.total_seconds()
    else:
        threshold = _real("idle_threshold", idle_threshold)
    if threshold <= 0.0:
        raise StatisticsInputError("idle_threshold", "must be longer than zero")
    seconds = sorted(_seconds_of(run_times))
    gaps = np.diff(np.array(seconds, dtype=float))
    total = float(np.minimum(gaps, threshold).sum()) if gaps.size else 0.0
    cut = int((gaps > threshold).sum()) if gaps.size else 0
    return MachineTime(total, len(seconds), cut, threshold)


# --------------------------------------------------------------------- pareto


@dataclass(frozen=True)
class ParetoItem:
    """One bar of a Pareto chart; percentages are ``None`` when all counts are 0."""

    label: str
    count: int
    percent: float | None
    cumulative_percent: float | None

    def as_json(self) -> dict[str, Any]:
        """``{"label", "count", "percent", "cumulative_percent"}``."""
        return {
            "label": self.label,
            "count": self.count,
            "percent": self.percent,
            "cumulative_percent": self.cumulative_percent,
        }


def pareto(counts: Mapping[str, int]) -> tuple[ParetoItem, ...]:
    """Counts sorted largest first, with each one's share and the running share.

    With total ``N = Σcᵢ`` and items sorted by count (largest first, ties by
    label)::

        percent_k = 100·c_k / N,   cumulative_k = 100·(c₁ + … + c_k) / N

    (the Pareto chart of quality practice; Juran — from memory). The running
    sum is kept in whole counts, so the last cumulative value is exactly 100.

    Parameters
    ----------
    counts : mapping of str to int
        Reason → count, counts ≥ 0. An empty mapping gives an empty tuple (no
        reasons is a true answer, not an error).

    Returns
    -------
    tuple of ParetoItem

    Raises
    ------
    StatisticsInputError
        Not a mapping, a label not a string, a negative or non-whole count.
    """
    if not isinstance(counts, Mapping):
        raise StatisticsInputError("counts", "must be a mapping of label to count")
    items: list[tuple[str, int]] = []
    for label, value in counts.items():
        if not isinstance(label, str):
            raise StatisticsInputError("counts", f"label {label!r} must be a string")
        items.append((label, _count(f"counts[{label!r}]", value)))
    items.sort(key=lambda kv: (-kv[1], kv[0]))
    total = sum(c for _, c in items)
    out: list[ParetoItem] = []
    running = 0
    for label, c in items:
        running += c
        if total:
            out.append(ParetoItem(label, c, 100.0 * c / total, 100.0 * running / total))
        else:
            out.append(ParetoItem(label, c, None, None))
    return tuple(out)
