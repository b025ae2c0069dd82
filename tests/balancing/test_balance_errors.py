"""Balance errors: random error from repeated runs, ΔU and the verdict rule."""

from __future__ import annotations

import cmath
import math

import numpy as np
import pytest

from shopapp.balancing.balance_errors import (
    RULE_WITH_ERRORS,
    error_estimate,
    judge_with_errors,
    random_error,
)
from shopapp.balancing.errors import BalancingInputError


def test_scatter_radius_hand_computed() -> None:
    # Hand computation: readings 0, 3, 3i → mean 1 + 1i; distances √2, √5, √5;
    # radius √5, RMS √((2 + 5 + 5)/3) = 2.
    r = random_error([0j, 3 + 0j, 3j])
    assert r.mean_gmm == pytest.approx(1 + 1j)
    assert r.radius_gmm == pytest.approx(math.sqrt(5.0), rel=1e-12)
    assert r.rms_gmm == pytest.approx(2.0, rel=1e-12)


def test_simulated_runs_on_a_circle_give_its_radius() -> None:
    # Simulation (marked as such): 8 readings equally spaced on a circle of 2.5 g·mm
    # around 40∠70° — their mean is the centre and every distance is 2.5.
    centre = cmath.rect(40.0, math.radians(70.0))
    z = centre + 2.5 * np.exp(1j * np.radians(np.arange(8) * 45.0 + 10.0))
    r = random_error(z)
    assert r.mean_gmm == pytest.approx(centre, rel=1e-12)
    assert r.radius_gmm == pytest.approx(2.5, rel=1e-12)
    assert r.rms_gmm == pytest.approx(2.5, rel=1e-12)


def test_fewer_than_three_runs_are_refused() -> None:
    with pytest.raises(BalancingInputError) as exc:
        random_error([1 + 0j, 2 + 0j])
    assert exc.value.field == "readings_gmm"


def test_error_estimate_is_the_arithmetic_sum() -> None:
    e = error_estimate(3.0, {"arbor": -4.0, "key": 1.5})
    assert e.delta_u_gmm == pytest.approx(8.5)
    assert e.systematic_gmm == {"arbor": 4.0, "key": 1.5}
    with pytest.raises(BalancingInputError) as exc:
        error_estimate(-1.0)
    assert exc.value.field == "random_gmm"


def test_verdict_leaves_room_for_the_errors() -> None:
    # Rule (ISO 21940-14 idea, from memory): U_res ≤ U_per − ΔU; 100 − 20 = 80.
    ok = judge_with_errors(75.0, 100.0, 20.0)
    assert ok.passed and not ok.negligible
    assert ok.effective_limit_gmm == pytest.approx(80.0)
    assert ok.rule == RULE_WITH_ERRORS
    # Within the plain limit but not within limit − ΔU: refused.
    assert judge_with_errors(85.0, 100.0, 20.0).passed is False


def test_small_errors_may_be_neglected_at_ten_percent() -> None:
    # Threshold 10 % of the limit (common practice / judgement): at 10 g·mm of 100 the
    # plain limit applies; just above it, limit − ΔU does.
    at = judge_with_errors(95.0, 100.0, 10.0)
    assert at.negligible and at.passed
    assert "neglected" in at.rule
    above = judge_with_errors(95.0, 100.0, 10.001)
    assert not above.negligible and not above.passed
    assert above.effective_limit_gmm == pytest.approx(89.999)


def test_errors_as_large_as_the_limit_fail_every_reading() -> None:
    v = judge_with_errors(0.0, 100.0, 120.0)
    assert v.passed is False
    assert v.effective_limit_gmm == 0.0
    assert any("no reading can prove" in n for n in v.notes)


@pytest.mark.parametrize(
    ("args", "field"),
    [((1.0, 0.0, 1.0), "limit_gmm"), ((-1.0, 10.0, 1.0), "residual_gmm"),
     ((1.0, 10.0, float("inf")), "delta_u_gmm")],
)
def test_bad_verdict_input_names_the_field(args: tuple, field: str) -> None:
    with pytest.raises(BalancingInputError) as exc:
        judge_with_errors(*args)
    assert exc.value.field == field
