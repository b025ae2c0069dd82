"""Statistics core of issue 17, checked against references outside the project.

References used (each check names its own beside it):

* statsmodels (``proportion_confint``, ``proportions_ztest``) — an independent
  implementation of the Wilson interval and the pooled two-proportion z-test;
* exact rational arithmetic (``fractions.Fraction`` and ``math.comb``) for the
  binomial quantiles of the funnel limits and the hypergeometric sums of
  Fisher's exact test, straight from their definitions;
* ``numpy.polyfit`` and ``scipy.stats.linregress`` for the least-squares trend
  (the module computes it by hand from the sums of squares);
* published worked values, marked "from memory" where quoted from memory;
* simulated shops (numpy ``Generator`` with fixed seeds, marked as simulations),
  whose true rates are known because the test drew them.
"""

from __future__ import annotations

import datetime as dt
import json
import math
from collections.abc import Sequence
from fractions import Fraction
from typing import Any

import numpy as np
import pytest
import scipy.stats
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.proportion import proportion_confint, proportions_ztest

from shopapp.measures.stats import (
    CAUTION,
    FLAG_LEVEL,
    HIGHER_IS_BETTER,
    MIN_FUNNEL_JOBS,
    Rate,
    StatisticsInputError,
    compare_rates,
    funnel,
    funnel_curve,
    funnel_limits,
    funnel_limits_at,
    machine_time,
    p_chart,
    pareto,
    rate,
    trend,
    trends,
    wilson_interval,
)

# ----------------------------------------------------------- reference helpers


def _binom_pmf_exact(n: int, p: Fraction) -> list[Fraction]:
    """Binomial pmf in exact rationals: C(n, k)·p^k·(1 − p)^(n − k)."""
    q = 1 - p
    return [math.comb(n, k) * p**k * q ** (n - k) for k in range(n + 1)]


def _quantile_exact(n: int, p: Fraction, level: Fraction) -> int:
    """Smallest k with P(X ≤ k) ≥ level — the definition of the binomial quantile
    (e.g. Casella & Berger, *Statistical Inference*, def. of a quantile — from memory)."""
    total = Fraction(0)
    for k, prob in enumerate(_binom_pmf_exact(n, p)):
        total += prob
        if total >= level:
            return k
    return n


def _fisher_two_sided_exact(x1: int, n1: int, x2: int, n2: int) -> float:
    """Fisher's exact test, two-sided, from its definition: the sum of the
    hypergeometric probabilities of all 2×2 tables with the observed margins that
    are no more probable than the observed one (Fisher 1935, *The Design of
    Experiments*; the 1e-7 relative tie tolerance follows R's fisher.test — from
    memory)."""
    events, total = x1 + x2, n1 + n2

    def prob(k: int) -> Fraction:
        return Fraction(math.comb(n1, k) * math.comb(n2, events - k), math.comb(total, events))

    observed = prob(x1)
    lo, hi = max(0, events - n2), min(n1, events)
    tables = [prob(k) for k in range(lo, hi + 1)]
    return float(sum(t for t in tables if t <= observed * Fraction(1 + 10**-7)))


def _independent_limits(n: int, p: Fraction, coverage: Fraction) -> tuple[int, int]:
    tail = (1 - coverage) / 2
    return _quantile_exact(n, p, tail), _quantile_exact(n, p, 1 - tail)


# ------------------------------------------------------------------- Wilson


@pytest.mark.parametrize(
    ("x", "n", "low", "high"),
    [
        # Newcombe, R. G. (1998), Statistics in Medicine 17:857–872, Table I,
        # Wilson score method without continuity correction — from memory.
        (81, 263, 0.2553, 0.3662),
        (15, 148, 0.0624, 0.1605),
        (0, 20, 0.0, 0.1611),
        (1, 29, 0.0061, 0.1718),
    ],
)
def test_wilson_matches_newcombes_worked_examples(x: int, n: int, low: float, high: float) -> None:
    interval = rate(x, n).interval_95
    assert interval is not None
    assert interval[0] == pytest.approx(low, abs=6e-5)
    assert interval[1] == pytest.approx(high, abs=6e-5)


@pytest.mark.parametrize("n", [1, 2, 5, 13, 30, 100, 1000])
def test_wilson_matches_statsmodels_for_every_count(n: int) -> None:
    # Reference: statsmodels.stats.proportion.proportion_confint(method="wilson").
    for x in range(n + 1) if n <= 100 else range(0, n + 1, 37):
        low, high = proportion_confint(x, n, alpha=0.05, method="wilson")
        got = wilson_interval(x, n)
        assert got is not None
        assert got[0] == pytest.approx(low, abs=1e-12)
        assert got[1] == pytest.approx(high, abs=1e-12)


def test_wilson_at_other_confidence_matches_statsmodels() -> None:
    # Reference: statsmodels proportion_confint(method="wilson", alpha=0.10).
    low, high = proportion_confint(7, 30, alpha=0.10, method="wilson")
    got = wilson_interval(7, 30, confidence=0.90)
    assert got == pytest.approx((low, high), abs=1e-12)


def test_wilson_closed_form_by_hand() -> None:
    # Wilson (1927) / Agresti & Coull (1998) closed form, worked by hand for x=7, n=30:
    # centre = (x + z²/2)/(n + z²), half = z·√n/(n + z²)·√(p̂q̂ + z²/(4n)).
    z = 1.959963984540054  # standard normal 97.5 % quantile (tables)
    x, n = 7, 30
    p = x / n
    centre = (x + z * z / 2) / (n + z * z)
    half = z * math.sqrt(n) / (n + z * z) * math.sqrt(p * (1 - p) + z * z / (4 * n))
    assert rate(x, n).interval_95 == pytest.approx((centre - half, centre + half), abs=1e-12)


@settings(max_examples=100, deadline=None)
@given(st.integers(min_value=1, max_value=5000).flatmap(
    lambda n: st.tuples(st.integers(min_value=0, max_value=n), st.just(n))))
def test_wilson_interval_holds_the_share_inside_zero_one(xn: tuple[int, int]) -> None:
    # Property of the Wilson interval (Agresti & Coull 1998): inside [0, 1], contains p̂.
    x, n = xn
    r = rate(x, n)
    assert r.interval_95 is not None and r.value is not None
    low, high = r.interval_95
    assert 0.0 <= low <= r.value <= high <= 1.0
    assert low < high


def test_rate_json_shape_and_zero_denominator() -> None:
    assert rate(7, 30).as_json().keys() == {"value", "numerator", "denominator", "interval_95"}
    empty = rate(0, 0)
    assert empty.value is None and empty.interval_95 is None
    assert empty.as_json() == {
        "value": None, "numerator": 0, "denominator": 0, "interval_95": None,
    }
    json.dumps(empty.as_json(), allow_nan=False)


@pytest.mark.parametrize(
    ("num", "den", "field"),
    [
        (-1, 5, "numerator"),
        (1, -5, "denominator"),
        (6, 5, "numerator"),
        (1.5, 5, "numerator"),
        (1, 5.0, "denominator"),
        (True, 5, "numerator"),
        ("3", 5, "numerator"),
        (None, 5, "numerator"),
    ],
)
def test_rate_refuses_bad_counts(num: Any, den: Any, field: str) -> None:
    with pytest.raises(StatisticsInputError) as err:
        rate(num, den)
    assert err.value.field == field
    assert isinstance(err.value, ValueError)


def test_rate_accepts_numpy_integers() -> None:
    r = rate(np.int64(3), np.int32(10))
    assert r.value == pytest.approx(0.3) and type(r.numerator) is int


def test_wilson_refuses_confidence_outside_zero_one() -> None:
    for bad in (0.0, 1.0, 1.5, float("nan")):
        with pytest.raises(StatisticsInputError, match="confidence"):
            wilson_interval(1, 10, confidence=bad)


# --------------------------------------------------------------- comparison


@pytest.mark.parametrize(
    ("x1", "n1", "x2", "n2"),
    [(10, 100, 25, 100), (30, 120, 22, 140), (45, 200, 40, 180), (12, 40, 30, 60)],
)
def test_z_test_matches_statsmodels(x1: int, n1: int, x2: int, n2: int) -> None:
    # Reference: statsmodels proportions_ztest (pooled variance is its default, prop_var=False).
    _, p_ref = proportions_ztest([x2, x1], [n2, n1])
    cmp = compare_rates(rate(x1, n1), rate(x2, n2), higher_is_better=False)
    assert cmp.test == "z_pooled"
    assert cmp.p_value == pytest.approx(p_ref, rel=1e-10)


def test_z_test_by_hand() -> None:
    # Hand computation of the pooled z-test (Fleiss — from memory):
    # p̂₁ = 10/100, p̂₂ = 25/100, p = 35/200 = 0.175,
    # SE = √(0.175·0.825·(2/100)) = 0.0537355, z = 0.15/0.0537355 = 2.79145,
    # p = 2·(1 − Φ(2.79145)) = 0.005247 (Φ from scipy.stats.norm).
    se = math.sqrt(0.175 * 0.825 * 0.02)
    z = 0.15 / se
    assert z == pytest.approx(2.79145, abs=1e-5)
    p = 2 * scipy.stats.norm.sf(z)
    cmp = compare_rates(rate(10, 100), rate(25, 100), higher_is_better=False)
    assert cmp.p_value == pytest.approx(p, rel=1e-12)
    assert cmp.verdict == "worse"  # rework went up 10 % → 25 %
    assert cmp.difference == pytest.approx(0.15)


def test_direction_flag_turns_the_verdict() -> None:
    a, b = rate(10, 100), rate(25, 100)
    assert compare_rates(a, b, higher_is_better=True).verdict == "better"
    assert compare_rates(a, b, higher_is_better=False).verdict == "worse"
    assert compare_rates(b, a, higher_is_better=False).verdict == "better"
    assert compare_rates(a, b, higher_is_better=HIGHER_IS_BETTER["first_pass_rate"]).verdict == (
        "better"
    )
    assert compare_rates(a, b, higher_is_better=HIGHER_IS_BETTER["rework_rate"]).verdict == "worse"


def test_no_clear_change_when_p_above_alpha() -> None:
    cmp = compare_rates(rate(20, 100), rate(24, 100), higher_is_better=True)
    # statsmodels gives p ≈ 0.49 for this pair (reference: proportions_ztest).
    assert cmp.p_value == pytest.approx(proportions_ztest([24, 20], [100, 100])[1], rel=1e-10)
    assert cmp.p_value > 0.05
    assert cmp.verdict == "no clear change"
    assert "could be chance" in cmp.reason


def test_alpha_moves_the_line() -> None:
    a, b = rate(30, 100), rate(42, 100)
    p = proportions_ztest([42, 30], [100, 100])[1]  # ≈ 0.078 (statsmodels reference)
    assert 0.05 < p < 0.10
    assert compare_rates(a, b, 0.05, higher_is_better=True).verdict == "no clear change"
    assert compare_rates(a, b, 0.10, higher_is_better=True).verdict == "better"


def test_fisher_reference_reproduces_the_lady_tasting_tea() -> None:
    # Fisher (1935): 3 of 4 cups right, two-sided p = 34/70 = 0.4857 — from memory.
    # Checks the test's own reference function before it is used below.
    assert _fisher_two_sided_exact(3, 4, 1, 4) == pytest.approx(34 / 70, rel=1e-12)


@pytest.mark.parametrize(
    ("x1", "n1", "x2", "n2"),
    [(0, 20, 4, 20), (1, 12, 6, 15), (2, 30, 0, 8), (9, 10, 4, 10), (0, 5, 0, 7)],
)
def test_small_expected_counts_use_fisher(x1: int, n1: int, x2: int, n2: int) -> None:
    # Reference: Fisher's exact test from its definition (exact rationals, above).
    cmp = compare_rates(rate(x1, n1), rate(x2, n2), higher_is_better=False)
    assert cmp.test == "fisher_exact"
    assert cmp.p_value == pytest.approx(_fisher_two_sided_exact(x1, n1, x2, n2), rel=1e-9)
    assert "Fisher" in cmp.reason


def test_fisher_calls_a_large_small_sample_change() -> None:
    # 0 of 15 against 8 of 15: expected counts 4 < 5 → Fisher; exact p (reference above)
    # is ≈ 0.0022, so the change is called.
    p = _fisher_two_sided_exact(0, 15, 8, 15)
    assert p < 0.01
    cmp = compare_rates(rate(0, 15), rate(8, 15), higher_is_better=False)
    assert cmp.test == "fisher_exact" and cmp.verdict == "worse"


def test_too_few_jobs_refuses_to_call() -> None:
    cmp = compare_rates(rate(0, 4), rate(4, 4), higher_is_better=False)
    assert cmp.verdict == "too few jobs"
    assert cmp.p_value is None and cmp.test is None
    assert "too few jobs" in cmp.reason and "4" in cmp.reason
    none = compare_rates(rate(0, 0), rate(3, 10), higher_is_better=True)
    assert none.verdict == "too few jobs" and none.difference is None
    json.dumps(none.as_json(), allow_nan=False)


def test_compare_refuses_bad_arguments() -> None:
    with pytest.raises(StatisticsInputError) as err:
        compare_rates((1, 10), rate(1, 10), higher_is_better=True)  # type: ignore[arg-type]
    assert err.value.field == "a"
    with pytest.raises(StatisticsInputError) as err:
        compare_rates(rate(1, 10), rate(1, 10), alpha=0.0, higher_is_better=True)
    assert err.value.field == "alpha"
    with pytest.raises(StatisticsInputError) as err:
        compare_rates(rate(1, 10), rate(1, 10), higher_is_better="yes")  # type: ignore[arg-type]
    assert err.value.field == "higher_is_better"


def test_simulated_type_one_error_and_power_of_the_comparison() -> None:
    # Simulation: two periods of 80 jobs with one true rework rate 0.2 (no change).
    # The pooled z-test should call a change in about alpha = 5 % of the draws; on
    # discrete data the true size differs a little, so the tolerance is 3 binomial
    # standard errors of the estimate plus 1 point for the discreteness.
    draws = 1500
    calls = 0
    for seed in range(draws):
        g = np.random.default_rng(seed)
        a = rate(int(g.binomial(80, 0.2)), 80)
        b = rate(int(g.binomial(80, 0.2)), 80)
        calls += compare_rates(a, b, higher_is_better=False).verdict in ("better", "worse")
    share = calls / draws
    se = math.sqrt(0.05 * 0.95 / draws)
    assert abs(share - 0.05) <= 3 * se + 0.01, share
    # Power: 0.10 → 0.25 with 150 jobs each; normal-approximation power (Fleiss — from
    # memory) is about 0.99, so at least 90 % of draws must say "worse".
    worse = 0
    for seed in range(300):
        g = np.random.default_rng(50_000 + seed)
        a = rate(int(g.binomial(150, 0.10)), 150)
        b = rate(int(g.binomial(150, 0.25)), 150)
        worse += compare_rates(a, b, higher_is_better=False).verdict == "worse"
    assert worse / 300 >= 0.90


# ------------------------------------------------------------------- funnel


@pytest.mark.parametrize(
    ("n", "p"),
    [(1, Fraction(1, 10)), (5, Fraction(1, 4)), (12, Fraction(1, 10)), (30, Fraction(1, 5)),
     (60, Fraction(3, 40)), (150, Fraction(1, 3)), (400, Fraction(1, 20)), (25, Fraction(9, 10))],
)
def test_funnel_limits_are_exact_binomial_quantiles(n: int, p: Fraction) -> None:
    # Reference: the binomial quantile from its definition in exact rationals
    # (Spiegelhalter 2005 limits without interpolation: Q(0.025), Q(0.975), Q(0.001), Q(0.999)).
    lim = funnel_limits(float(p), n)
    assert lim.counts_95 == _independent_limits(n, p, Fraction(95, 100))
    assert lim.counts_99_8 == _independent_limits(n, p, Fraction(998, 1000))
    assert lim.limits_99_8 == (lim.counts_99_8[0] / n, lim.counts_99_8[1] / n)


def test_funnel_limits_have_the_stated_tail_probabilities() -> None:
    # Reference: scipy.stats.binom.sf/cdf (tail sums, not the ppf the module uses).
    # Definition of the quantile: P(X > high) ≤ 0.001 < P(X ≥ high), and likewise below.
    for n, p in [(30, 0.2), (80, 0.08), (200, 0.35)]:
        low, high = funnel_limits(p, n).counts_99_8
        assert scipy.stats.binom.sf(high, n, p) <= 0.001 < scipy.stats.binom.sf(high - 1, n, p)
        assert scipy.stats.binom.cdf(low - 1, n, p) < 0.001 <= scipy.stats.binom.cdf(low, n, p)


def test_funnel_curve_matches_the_exact_quantiles_at_every_n() -> None:
    # Reference: exact-rational quantiles for every n from 1 to 80.
    p = Fraction(3, 20)
    curve = funnel_curve(float(p), 80)
    assert [c.n for c in curve] == list(range(1, 81))
    for c in curve:
        assert c.counts_99_8 == _independent_limits(c.n, p, Fraction(998, 1000)), c.n
        assert c.counts_95 == _independent_limits(c.n, p, Fraction(95, 100)), c.n
    part = funnel_curve(0.15, 40, n_min=30)
    assert [c.n for c in part] == list(range(30, 41))
    json.dumps([c.as_json() for c in part], allow_nan=False)


def test_funnel_limits_at_many_n_are_the_tail_quantiles_of_each() -> None:
    # Reference: scipy.stats.binom.sf/cdf tail sums at each n (not the ppf the module
    # uses), for vertices as a funnel of a large unit asks for them (past 5 000 jobs).
    ns = [1, 7, 80, 999, 5_001, 12_345, 40_000]
    p = 0.07
    got = funnel_limits_at(p, ns)
    assert [g.n for g in got] == ns
    for g in got:
        n = g.n
        low, high = g.counts_99_8
        assert scipy.stats.binom.sf(high, n, p) <= 0.001 < scipy.stats.binom.sf(high - 1, n, p)
        assert scipy.stats.binom.cdf(low - 1, n, p) < 0.001 <= scipy.stats.binom.cdf(low, n, p)
        assert g == funnel_limits(p, n)
    with pytest.raises(StatisticsInputError, match="at least 1"):
        funnel_limits_at(p, [5, 0])


def test_funnel_target_is_the_pooled_rate_and_flags_with_sentences() -> None:
    units = [
        ("tfb", "rotor type TFB-CF-1250", 8, 30),
        ("fan", "rotor type FAN-400", 2, 100),
        ("imp", "rotor type IMP-22", 3, 120),
        ("new", "rotor type NEW-1", 3, 4),
    ]
    f = funnel(units, nouns=("rework", "reworks"))
    # Pooled by hand: (8 + 2 + 3 + 3)/(30 + 100 + 120 + 4) = 16/254.
    assert f.target == pytest.approx(16 / 254)
    assert f.overall.numerator == 16 and f.overall.denominator == 254
    by_key = {u.key: u for u in f.units}
    # Reference: exact quantile at p = 16/254, n = 30: Q(0.999) is below 8 → flagged above;
    # at n = 100, 2 lies inside [Q(0.001), Q(0.999)] → not flagged.
    high = _independent_limits(30, Fraction(16, 254), Fraction(998, 1000))[1]
    assert high < 8
    low_fan, high_fan = _independent_limits(100, Fraction(16, 254), Fraction(998, 1000))
    assert low_fan <= 2 <= high_fan
    assert by_key["tfb"].flag == "above"
    assert by_key["tfb"].sentence == (
        "rotor type TFB-CF-1250: 8 reworks in 30 jobs, above what chance explains"
    )
    assert by_key["fan"].flag is None
    assert by_key["fan"].sentence.endswith("within what chance explains")
    # 3 of 4 is far above 9 % but 4 jobs are fewer than MIN_FUNNEL_JOBS: never flagged.
    assert by_key["new"].flag is None
    assert "too few jobs to judge" in by_key["new"].sentence
    data = f.as_json()
    assert data["caution"] == CAUTION and data["flag_level"] == FLAG_LEVEL
    assert data["units"][0].keys() == {
        "key", "label", "rate", "limits_95", "limits_99_8", "flag", "sentence",
    }
    json.dumps(data, allow_nan=False)


def test_funnel_flags_below_and_uses_a_given_target() -> None:
    # Target 0.30 given; 2 of 60: exact Q(0.001) at n = 60, p = 0.3 is well above 2.
    low = _independent_limits(60, Fraction(3, 10), Fraction(998, 1000))[0]
    assert low > 2
    f = funnel([(1, "operator A", 2, 60), (2, "operator B", 18, 60)], overall_p=0.3)
    assert f.target == 0.3
    assert [u.flag for u in f.units] == ["below", None]
    assert f.units[0].sentence == "operator A: 2 events in 60 jobs, below what chance explains"


def test_funnel_singular_words_and_empty_units() -> None:
    f = funnel([("a", "op A", 1, 1), ("b", "op B", 0, 0), ("c", "op C", 5, 50)],
               nouns=("rework", "reworks"))
    assert f.units[0].sentence.startswith("op A: 1 rework in 1 job,")
    assert f.units[1].sentence == "op B: no jobs"
    assert f.units[1].limits is None and f.units[1].rate.value is None
    nothing = funnel([("a", "op A", 0, 0)])
    assert nothing.target is None and nothing.overall.value is None
    assert nothing.units[0].flag is None
    json.dumps(nothing.as_json(), allow_nan=False)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(min_value=1, max_value=120).flatmap(
    lambda n: st.tuples(st.integers(min_value=0, max_value=n), st.just(n))),
    min_size=1, max_size=8))
def test_a_unit_is_flagged_exactly_when_its_point_lies_outside_its_drawn_limits(
    counts: list[tuple[int, int]],
) -> None:
    # Consistency of the chosen rule (no interpolation): flagged ⇔ rate strictly outside
    # the 99.8 % limits drawn for it, for units with at least MIN_FUNNEL_JOBS jobs.
    f = funnel([(i, f"u{i}", x, n) for i, (x, n) in enumerate(counts)])
    for u in f.units:
        assert u.limits is not None and u.rate.value is not None
        low, high = u.limits.limits_99_8
        outside = u.rate.value > high or u.rate.value < low
        assert (u.flag is not None) == (outside and u.rate.denominator >= MIN_FUNNEL_JOBS)


def test_simulated_shop_flags_the_operator_whose_rework_is_truly_higher() -> None:
    # Simulation: six operators with a true rework rate of 8 % over 60 jobs each, one
    # operator ("A") at 30 % over 60 jobs, and one newcomer ("E") at 8 % over 15 jobs;
    # target = pooled rate. Measured on this code: A flagged "above" in about 82 % of
    # seeds; required here: at least 75 % of 400 seeds (3.5 standard errors below).
    # E's true rate equals the others', so it may be flagged only by chance: at most
    # 0.2 % per look by the flag level, i.e. 0.8 expected in 400 seeds; allowed up to
    # 4 (Poisson(0.8) tail beyond that < 0.2 %).
    seeds = 400
    a_flagged = e_flagged = 0
    for seed in range(seeds):
        g = np.random.default_rng(seed)
        jobs = {"A": 60, **{f"O{i}": 60 for i in range(6)}, "E": 15}
        true = {key: 0.08 for key in jobs} | {"A": 0.30}
        units = [(k, k, int(g.binomial(n, true[k])), n) for k, n in jobs.items()]
        flags = {u.key: u.flag for u in funnel(units).units}
        a_flagged += flags["A"] == "above"
        e_flagged += flags["E"] is not None
    assert a_flagged / seeds >= 0.75, a_flagged
    assert e_flagged <= 4, e_flagged


def test_simulated_false_flag_rate_with_a_known_target_matches_exact_theory() -> None:
    # Simulation: units whose true rate IS the target (0.2, given as overall_p), large
    # enough that the discrete limits sit near their nominal level. The expected false
    # flag rate is computed exactly from the binomial tails outside the reference limits
    # (exact rationals), which must itself be at most 1 − FLAG_LEVEL = 0.2 %. The observed
    # rate over 2000 seeds × 6 units must lie within 4 standard errors of it.
    p = Fraction(1, 5)
    sizes = [150, 200, 250, 300, 350, 400]
    expected_each = []
    for n in sizes:
        low, high = _independent_limits(n, p, Fraction(998, 1000))
        pmf = _binom_pmf_exact(n, p)
        expected_each.append(float(sum(pmf[:low]) + sum(pmf[high + 1:])))
    expected = sum(expected_each) / len(sizes)
    assert expected <= 1 - FLAG_LEVEL
    seeds = 2000
    flags = 0
    for seed in range(seeds):
        g = np.random.default_rng(100_000 + seed)
        units = [(i, str(i), int(g.binomial(n, 0.2)), n) for i, n in enumerate(sizes)]
        flags += sum(u.flag is not None for u in funnel(units, overall_p=0.2).units)
    looks = seeds * len(sizes)
    observed = flags / looks
    se = math.sqrt(expected * (1 - expected) / looks)
    assert abs(observed - expected) <= 4 * se, (observed, expected)


def test_simulated_false_flag_rate_with_a_pooled_target_stays_below_the_level() -> None:
    # Simulation: all units share one true rate (10 %), target = pooled. At most
    # 0.2 % of looks may be flagged; tolerance 3 binomial standard errors of that
    # level (measured on this code: well below, about 0.01 %, as the discrete limits
    # are conservative and the pooled target leans towards each unit).
    seeds = 1000
    sizes = [60, 60, 40, 40, 15, 8]
    flags = 0
    for seed in range(seeds):
        g = np.random.default_rng(200_000 + seed)
        units = [(i, str(i), int(g.binomial(n, 0.1)), n) for i, n in enumerate(sizes)]
        flags += sum(u.flag is not None for u in funnel(units).units)
    looks = seeds * len(sizes)
    level = 1 - FLAG_LEVEL
    assert flags / looks <= level + 3 * math.sqrt(level * (1 - level) / looks), flags


@pytest.mark.parametrize(
    ("units", "kwargs", "field"),
    [
        ([], {}, "units"),
        ("abc", {}, "units"),
        ([("a", "A", 1)], {}, "units[0]"),
        ([("a", "A", -1, 5)], {}, "units[0].numerator"),
        ([("a", "A", 6, 5)], {}, "units[0].numerator"),
        ([("a", "A", 1, 5), ("b", "B", 1, -2)], {}, "units[1].denominator"),
        ([("a", "A", 1, 5), ("a", "B", 1, 5)], {}, "units[1].key"),
        ([(1.5, "A", 1, 5)], {}, "units[0].key"),
        ([("a", 7, 1, 5)], {}, "units[0].label"),
        ([("a", "A", 1, 5)], {"overall_p": 1.2}, "overall_p"),
        ([("a", "A", 1, 5)], {"overall_p": float("nan")}, "overall_p"),
        ([("a", "A", 1, 5)], {"min_jobs": 0}, "min_jobs"),
        ([("a", "A", 1, 5)], {"nouns": ("rework",)}, "nouns"),
    ],
)
def test_funnel_refuses_bad_input(units: Any, kwargs: dict[str, Any], field: str) -> None:
    with pytest.raises(StatisticsInputError) as err:
        funnel(units, **kwargs)
    assert err.value.field == field


def test_funnel_curve_and_limits_refuse_bad_input() -> None:
    cases: list[tuple[Any, str]] = [
        (lambda: funnel_curve(-0.1, 10), "target"),
        (lambda: funnel_curve(0.1, 10, n_min=0), "n_min"),
        (lambda: funnel_curve(0.1, 3, n_min=5), "n_max"),
        (lambda: funnel_curve(0.1, 10**6), "n_max"),
        (lambda: funnel_limits(0.1, 0), "n"),
        (lambda: funnel_limits(float("inf"), 5), "target"),
    ]
    for call, field in cases:
        with pytest.raises(StatisticsInputError) as err:
            call()
        assert err.value.field == field


# ------------------------------------------------------------------ p-chart


def test_p_chart_limits_follow_the_textbook_formula() -> None:
    months = [("2026-01", 4, 40), ("2026-02", 9, 50), ("2026-03", 2, 20), ("2026-04", 5, 90)]
    chart = p_chart(months)
    # Montgomery, Introduction to Statistical Quality Control (from memory):
    # p̄ = Σx/Σn, limits p̄ ± 3√(p̄(1 − p̄)/nᵢ), clipped to [0, 1].
    pbar = 20 / 200
    assert chart.centre == pytest.approx(pbar)
    for point, (_, _, n) in zip(chart.points, months, strict=True):
        half = 3 * math.sqrt(pbar * (1 - pbar) / n)
        assert point.ucl == pytest.approx(min(1.0, pbar + half))
        assert point.lcl == pytest.approx(max(0.0, pbar - half))
    # n = 20: p̄ − 3σ = 0.1 − 0.2012 < 0 → clipped to 0.
    assert chart.points[2].lcl == 0.0


def test_p_chart_marks_points_outside_the_limits() -> None:
    months = [(f"m{i}", 20, 200) for i in range(10)] + [("m10", 60, 200), ("m11", 2, 200)]
    chart = p_chart(months)
    pbar = 262 / 2400
    half = 3 * math.sqrt(pbar * (1 - pbar) / 200)  # textbook formula (Montgomery, from memory)
    # By hand: p̄ = 0.1092, 3σ = 0.0662 → limits 0.043 and 0.175; m10 = 0.30 above,
    # m11 = 0.01 below, the others (0.10) inside.
    assert pbar + half < 60 / 200 and 2 / 200 < pbar - half < 20 / 200 < pbar + half
    assert chart.points[10].outside == "above"
    assert chart.points[11].outside == "below"
    assert all(p.outside is None for p in chart.points[:10])


def test_run_rule_needs_eight_in_a_row() -> None:
    # Western Electric "eight in a row on one side" (from memory). Alternating
    # months around the centre, then 8 below and 7 above, all with the same n.
    low, high = ("lo", 1, 20), ("hi", 3, 20)
    months = [low, high] * 3 + [low] * 8 + [high] * 7 + [low, high, high]
    chart = p_chart(months)
    assert chart.centre == pytest.approx(0.1)  # 12 months of 1/20, 12 of 3/20: by hand
    assert [(r.side, r.first, r.last, r.length) for r in chart.runs] == [("below", 6, 13, 8)]
    assert [p.in_run for p in chart.points] == [False] * 6 + [True] * 8 + [False] * 10
    assert chart.as_json()["runs"] == [{"side": "below", "first": 6, "last": 13, "length": 8}]


def test_run_rule_breaks_on_the_centre_line_and_skips_empty_months() -> None:
    # Centre p̄ = 0.1 by construction (as many 1/20 as 3/20 months; 2/20 on the line),
    # so by hand: 1/20 below, 3/20 above, 2/20 exactly on the centre line.
    low, high, on, empty = ("lo", 1, 20), ("hi", 3, 20), ("on", 2, 20), ("none", 0, 0)
    broken = [high] * 4 + [on] + [high] * 4 + [low] * 8 + [on]
    chart = p_chart(broken)
    assert chart.centre == pytest.approx(0.1)
    assert chart.points[4].rate.value == chart.centre  # on the line: no side
    assert [(r.side, r.first, r.length) for r in chart.runs] == [("below", 9, 8)]
    skipped = [high] * 4 + [empty] + [high] * 4 + [low] * 8
    chart = p_chart(skipped)
    assert [(r.side, r.first, r.last, r.length) for r in chart.runs] == [
        ("above", 0, 8, 8), ("below", 9, 16, 8),
    ]
    assert chart.points[4].in_run is False and chart.points[4].lcl is None
    assert p_chart(skipped, run_length=9).runs == ()


def test_p_chart_without_jobs_and_json() -> None:
    chart = p_chart([("2026-01", 0, 0), ("2026-02", 0, 0)])
    assert chart.centre is None and chart.runs == ()
    assert all(p.ucl is None and p.rate.value is None for p in chart.points)
    json.dumps(chart.as_json(), allow_nan=False)
    zero = p_chart([("a", 0, 10), ("b", 0, 12)])
    assert zero.centre == 0.0 and all(p.outside is None for p in zero.points)
    data = p_chart([("a", 1, 10), ("b", 2, 12)]).as_json()
    assert data.keys() == {"centre", "run_length", "caution", "points", "runs"}
    assert data["points"][0].keys() == {"label", "rate", "lcl", "ucl", "outside", "in_run"}
    json.dumps(data, allow_nan=False)


@pytest.mark.parametrize(
    ("months", "kwargs", "field"),
    [
        ([], {}, "months"),
        ([("a", 1)], {}, "months[0]"),
        ([("a", 1, 5), ("b", 7, 5)], {}, "months[1].numerator"),
        ([(3, 1, 5)], {}, "months[0].label"),
        ([("a", 1, 5)], {"run_length": 1}, "run_length"),
    ],
)
def test_p_chart_refuses_bad_input(months: Any, kwargs: dict[str, Any], field: str) -> None:
    with pytest.raises(StatisticsInputError) as err:
        p_chart(months, **kwargs)
    assert err.value.field == field


# -------------------------------------------------------------------- trend


def _check_against_references(xs: Sequence[float], ys: Sequence[float]) -> None:
    got = trend(xs, ys)
    # Reference 1: numpy.polyfit, degree 1; its covariance (scaled by χ²/(n − 2))
    # gives the slope's variance.
    (slope, intercept), cov = np.polyfit(xs, ys, 1, cov=True)
    assert got.slope == pytest.approx(slope, rel=1e-9, abs=1e-12)
    assert got.intercept == pytest.approx(intercept, rel=1e-9, abs=1e-9)
    assert got.slope_stderr == pytest.approx(math.sqrt(cov[0, 0]), rel=1e-7)
    # Reference 2: scipy.stats.linregress (its own implementation).
    ref = scipy.stats.linregress(xs, ys)
    assert got.slope_stderr == pytest.approx(ref.stderr, rel=1e-9)
    assert got.p_value == pytest.approx(ref.pvalue, rel=1e-7, abs=1e-15)


def test_trend_matches_polyfit_and_linregress() -> None:
    _check_against_references([1, 2, 3, 4, 5, 6], [2.1, 3.9, 6.2, 7.8, 10.1, 12.2])
    _check_against_references([0, 30, 95, 180, 365, 400], [8.0, 8.4, 7.9, 9.1, 9.6, 9.2])
    g = np.random.default_rng(7)  # simulated proving results drifting up
    xs = np.sort(g.uniform(0, 1000, 40))
    _check_against_references(xs.tolist(), (3 + 0.002 * xs + g.normal(0, 0.5, 40)).tolist())


def test_trend_of_flat_noise_has_a_large_p_value_and_perfect_fit_zero() -> None:
    flat = trend([1, 2, 3, 4], [5.0, 6.0, 6.0, 5.0])
    assert flat.slope == pytest.approx(0.0, abs=1e-12) and flat.p_value == pytest.approx(1.0)
    exact = trend([0, 1, 2], [1.0, 3.0, 5.0])
    assert exact.slope == pytest.approx(2.0) and exact.p_value < 1e-6
    assert math.isfinite(exact.p_value) and math.isfinite(exact.slope_stderr)
    constant = trend([0, 1, 2], [4.0, 4.0, 4.0])
    assert constant.slope == 0.0 and constant.p_value == 1.0
    json.dumps(exact.as_json(), allow_nan=False)


def test_crossing_of_a_limit() -> None:
    # y = 1 + x through (0, 1), (1, 2), (2, 3): meets 5 at x = 4 (by hand).
    t = trend([0, 1, 2], [1.0, 2.0, 3.0])
    assert t.crossing_x(5.0) == pytest.approx(4.0)
    assert t.crosses(5.0, before_x=4.0 + 1e-9)
    assert not t.crosses(5.0, before_x=3.9)
    assert t.crosses(3.0, before_x=2.0)  # on the limit at the last point
    assert not t.crosses(2.5, before_x=10.0)  # already past it at the last point
    falling = trend([0, 1, 2], [9.0, 8.0, 7.0])
    assert falling.crosses(5.0, before_x=4.0) and not falling.crosses(5.0, before_x=3.5)
    flat = trend([0, 1, 2], [4.0, 4.0, 4.0])
    assert flat.crossing_x(5.0) is None and not flat.crosses(5.0, before_x=100.0)
    with pytest.raises(StatisticsInputError) as err:
        t.crosses(5.0, before_x=1.0)
    assert err.value.field == "before_x"


def test_crossing_with_dates_as_day_numbers() -> None:
    # Proving results (g·mm) drifting up by 0.01 per day from 2026-01-01; claim 6.0.
    # Line by hand: 2.0 + 0.01·d → meets 6.0 at d = 400, i.e. 2027-02-05.
    start = dt.date(2026, 1, 1)
    days = [0, 100, 200, 300]
    t = trend([start.toordinal() + d for d in days], [2.0 + 0.01 * d for d in days])
    crossing = t.crossing_x(6.0)
    assert crossing is not None
    assert dt.date.fromordinal(round(crossing)) == dt.date(2027, 2, 5)
    assert t.crosses(6.0, before_x=dt.date(2027, 3, 1).toordinal())
    assert not t.crosses(6.0, before_x=dt.date(2027, 1, 1).toordinal())


@pytest.mark.parametrize(
    ("xs", "ys", "field"),
    [
        ([], [], "xs"),
        ([1, 2], [1, 2], "xs"),
        ([1, 2, 3], [1, 2], "ys"),
        ([2, 2, 2], [1, 2, 3], "xs"),
        ([1, 2, float("nan")], [1, 2, 3], "xs[2]"),
        ([1, 2, 3], [1, float("inf"), 3], "ys[1]"),
        ([1, 2, "x"], [1, 2, 3], "xs[2]"),
        ([1, 2, 3], [1e308, -1e308, 1e308], "ys"),
    ],
)
def test_trend_refuses_bad_input(xs: Any, ys: Any, field: str) -> None:
    with pytest.raises(StatisticsInputError) as err:
        trend(xs, ys)
    assert err.value.field == field


# ------------------------------------------------------------- machine time


def test_machine_time_caps_long_gaps_at_the_threshold() -> None:
    # By hand: runs at 0, 5, 12 min, a lunch break, 90, 96 min; threshold 30 min:
    # 5 + 7 + min(78, 30) + 6 = 48 min; one gap cut.
    t0 = dt.datetime(2026, 10, 5, 8, 0)
    runs = [t0 + dt.timedelta(minutes=m) for m in (90, 0, 12, 5, 96)]  # any order
    got = machine_time(runs, dt.timedelta(minutes=30))
    assert got.seconds == pytest.approx(48 * 60)
    assert got.runs == 5 and got.gaps_cut == 1
    secs = machine_time([0.0, 300.0, 720.0, 5400.0, 5760.0], 1800.0)
    assert secs.seconds == pytest.approx(48 * 60)
    assert secs.as_json() == {
        "seconds": 2880.0, "runs": 5, "gaps_cut": 1, "idle_threshold_seconds": 1800.0,
    }


def test_machine_time_is_continuous_at_the_threshold() -> None:
    # The chosen rule (cut gap counts as the threshold) by hand: a gap one second
    # under or over a 600 s threshold gives 599 s and 600 s, not 599 s and 0 s.
    assert machine_time([0, 599], 600).seconds == pytest.approx(599)
    assert machine_time([0, 601], 600).seconds == pytest.approx(600)


def test_machine_time_with_time_zones_and_edge_cases() -> None:
    utc = dt.UTC
    cet = dt.timezone(dt.timedelta(hours=1))
    runs = [dt.datetime(2026, 10, 5, 8, 0, tzinfo=utc), dt.datetime(2026, 10, 5, 9, 10, tzinfo=cet)]
    assert machine_time(runs).seconds == pytest.approx(600)  # 08:00 UTC → 08:10 UTC
    assert machine_time([]).seconds == 0.0
    assert machine_time([dt.datetime(2026, 1, 1)]).seconds == 0.0


@pytest.mark.parametrize(
    ("runs", "threshold", "field"),
    [
        ([0, 10], 0, "idle_threshold"),
        ([0, 10], -5.0, "idle_threshold"),
        ([0, 10], dt.timedelta(0), "idle_threshold"),
        ([0, 10], float("nan"), "idle_threshold"),
        ([0, float("nan")], 60, "run_times[1]"),
        ([dt.datetime(2026, 1, 1), 10.0], 60, "run_times"),
        ([dt.date(2026, 1, 1), dt.date(2026, 1, 2)], 60, "run_times"),
        ([dt.datetime(2026, 1, 1), dt.datetime(2026, 1, 1, tzinfo=dt.UTC)], 60, "run_times"),
        ("0 10", 60, "run_times"),
    ],
)
def test_machine_time_refuses_bad_input(runs: Any, threshold: Any, field: str) -> None:
    with pytest.raises(StatisticsInputError) as err:
        machine_time(runs, threshold)
    assert err.value.field == field


# ------------------------------------------------------------------- pareto


def test_pareto_sorts_and_accumulates() -> None:
    # By hand: total 20; 10 → 50 %, 6 → 30 % (80 %), 2 and 2 (ties by name) → 90 %, 100 %.
    items = pareto({"wrong key": 2, "cracked hub": 10, "bent shaft": 2, "customer return": 6})
    assert [(i.label, i.count) for i in items] == [
        ("cracked hub", 10), ("customer return", 6), ("bent shaft", 2), ("wrong key", 2),
    ]
    assert [i.percent for i in items] == pytest.approx([50, 30, 10, 10])
    assert [i.cumulative_percent for i in items] == pytest.approx([50, 80, 90, 100])
    assert items[-1].cumulative_percent == 100.0
    assert items[0].as_json() == {
        "label": "cracked hub", "count": 10, "percent": 50.0, "cumulative_percent": 50.0,
    }


def test_pareto_edge_cases_and_bad_input() -> None:
    assert pareto({}) == ()
    zeros = pareto({"a": 0, "b": 0})
    assert all(i.percent is None and i.cumulative_percent is None for i in zeros)
    json.dumps([i.as_json() for i in zeros], allow_nan=False)
    thirds = pareto({"a": 1, "b": 1, "c": 1})
    assert thirds[-1].cumulative_percent == 100.0  # exact, not 99.99…
    for bad, field in [({"a": -1}, "counts['a']"), ({"a": 1.5}, "counts['a']"),
                       ({3: 1}, "counts"), ([("a", 1)], "counts")]:
        with pytest.raises(StatisticsInputError) as err:
            pareto(bad)  # type: ignore[arg-type]
        assert err.value.field == field


def test_caution_is_one_sentence_about_questions_not_verdicts() -> None:
    assert CAUTION.count(".") == 1 and CAUTION.endswith(".")
    assert "not a verdict on a person" in CAUTION
    assert isinstance(Rate(1, 2), Rate)


def test_many_trends_at_once_match_linregress_series_by_series() -> None:
    # Reference: scipy.stats.linregress, fitted one series at a time; lengths 3 to 8 as
    # a rotor's last visits (dates as day numbers, values in % of limit).
    g = np.random.default_rng(11)
    series = []
    for i in range(300):
        n = 3 + i % 6
        days = np.sort(g.choice(np.arange(739_000, 740_500), size=n, replace=False))
        series.append((days.astype(float).tolist(),
                       (40 + 0.01 * (days - 739_000) * g.normal(0, 1)
                        + g.normal(0, 5, n)).tolist()))
    got = trends(series)
    for (xs, ys), line in zip(series, got, strict=True):
        ref = scipy.stats.linregress(xs, ys)
        assert line is not None and line.n == len(xs)
        assert line.slope == pytest.approx(ref.slope, rel=1e-9, abs=1e-12)
        assert line.slope_stderr == pytest.approx(ref.stderr, rel=1e-9)
        assert line.p_value == pytest.approx(ref.pvalue, rel=1e-7, abs=1e-15)
        single = trend(xs, ys)  # the one-at-a-time function gives the same line
        assert (line.x_first, line.x_last) == (single.x_first, single.x_last)
        assert line.intercept == pytest.approx(single.intercept, rel=1e-9, abs=1e-9)


def test_many_trends_leave_out_what_one_trend_refuses() -> None:
    # Each refused series is one that trend() refuses (test_trend_refuses_bad_input);
    # the good series beside them still get their lines.
    good = ([1.0, 2.0, 3.0], [1.0, 2.0, 4.0])
    refused = [([1, 2], [1, 2]), ([1, 2, 3], [1, 2]), ([2, 2, 2], [1, 2, 3]),
               ([1, 2, float("nan")], [1, 2, 3]), ([1, 2, 3], [1, float("inf"), 3]),
               ([1, 2, 3], [1e308, -1e308, 1e308])]
    for xs, ys in refused:
        with pytest.raises(StatisticsInputError):
            trend(xs, ys)
    got = trends([good, *refused, good])
    assert got[1:-1] == [None] * len(refused)
    assert got[0] == got[-1] and got[0] is not None
    assert got[0].slope == pytest.approx(trend(*good).slope)
    # Perfect fits as trend() has them: p = 0 for a sloped line, 1 for a flat one.
    exact, flat = trends([([0, 1, 2], [1.0, 3.0, 5.0]), ([0, 1, 2], [4.0, 4.0, 4.0])])
    assert exact is not None and exact.p_value < 1e-6 and exact.slope == pytest.approx(2.0)
    assert flat is not None and flat.slope == 0.0 and flat.p_value == 1.0
    assert trends([]) == []
