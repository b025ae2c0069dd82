"""Rigid/flexible check, Jeffcott response and balancing-speed advice.

Jeffcott rotor: the steady-state response to a rotating unbalance,
|X|/e = r²/√((1−r²)² + (2ζr)²), lag φ = atan2(2ζr, 1−r²) — vibration textbooks
(Rao, *Mechanical Vibrations*, rotating-unbalance section; Thomson, *Theory of
Vibration with Applications*; from memory). Checked here independently by
integrating the equation of motion with scipy.integrate.solve_ivp.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import solve_ivp

from shopapp.balancing import dynamics as dyn
from shopapp.balancing.errors import BalancingInputError


def _steady_state(r: float, zeta: float) -> tuple[float, float]:
    """Amplitude/e and lag (deg) of x'' + 2ζx' + x = r²·cos(r·t), by time integration.

    Non-dimensional Jeffcott rotor (ωn = 1, e = 1): one transverse direction of
    m·x'' + c·x' + k·x = m·e·Ω²·cos(Ωt). Integrated with scipy's RK45 until the
    transient has decayed, then x(t) is projected onto cos/sin over whole periods.
    """
    t_settle = 30.0 / zeta  # transient ~ exp(−ζt): e^−30
    period = 2.0 * math.pi / r
    n_per = 20
    t_end = t_settle + n_per * period
    t_eval = np.linspace(t_settle, t_end, 400 * n_per, endpoint=False)

    def rhs(t: float, y: np.ndarray) -> list[float]:
        return [y[1], r * r * math.cos(r * t) - 2.0 * zeta * y[1] - y[0]]

    sol = solve_ivp(rhs, (0.0, t_end), [0.0, 0.0], t_eval=t_eval, rtol=1e-9, atol=1e-11)
    x = sol.y[0]
    a = 2.0 * np.mean(x * np.cos(r * sol.t))  # X·cos φ
    b = 2.0 * np.mean(x * np.sin(r * sol.t))  # X·sin φ
    return math.hypot(a, b), math.degrees(math.atan2(b, a))


@pytest.mark.parametrize(
    ("r", "zeta"), [(0.3, 0.05), (0.9, 0.1), (1.0, 0.1), (1.5, 0.2), (3.0, 0.05)]
)
def test_jeffcott_matches_time_integration(r, zeta) -> None:
    # Independent solver: scipy.integrate.solve_ivp of the damped forced oscillator.
    amp, lag = _steady_state(r, zeta)
    resp = dyn.jeffcott_response(r, zeta)
    assert_allclose(resp.amplitude_ratio, amp, rtol=2e-4)
    assert_allclose(resp.phase_lag_deg, lag, atol=0.05)


def test_jeffcott_textbook_limits() -> None:
    # Textbook behaviour (Rao, from memory): at r = 1 the lag is 90° and |X|/e = 1/(2ζ);
    # far above resonance |X|/e → 1 and the lag → 180° (rotation about the centre of mass).
    at_res = dyn.jeffcott_response(1.0, 0.1)
    assert_allclose(at_res.phase_lag_deg, 90.0)
    assert_allclose(at_res.amplitude_ratio, 5.0)
    high = dyn.jeffcott_response(50.0, 0.05)
    assert abs(high.amplitude_ratio - 1.0) < 1e-3
    assert high.phase_lag_deg > 179.0
    low = dyn.jeffcott_response(0.1, 0.05)
    assert low.phase_lag_deg < 1.0


def test_jeffcott_arrays_broadcast() -> None:
    r = np.array([0.5, 1.0, 2.0])
    resp = dyn.jeffcott_response(r, 0.2)
    assert resp.amplitude_ratio.shape == (3,)
    # Monotone phase through resonance (textbook).
    assert np.all(np.diff(resp.phase_lag_deg) > 0.0)


def test_rigid_below_70_percent() -> None:
    # Common practice, no source: rigid while service speed ≤ 70 % of first bending critical.
    check = dyn.rigid_or_flexible(2900.0, 5000.0)
    assert check.rigid and check.warnings == []
    assert_allclose(check.speed_ratio, 0.58)


def test_flexible_above_70_percent_warns() -> None:
    check = dyn.rigid_or_flexible(3600.0, 5000.0)
    assert not check.rigid
    assert any("not rigid" in w for w in check.warnings)


def test_soft_bearing_advice() -> None:
    # Common practice: soft-bearing machines at ≥ 2× (better 3×) the suspension resonance.
    adv = dyn.balancing_speed_advice(
        "soft", 300.0, proposed_speed_rpm=450.0, max_permitted_speed_rpm=3000.0
    )
    assert adv.recommended_min_rpm == 600.0
    assert adv.speed_ok is False
    assert adv.warnings
    good = dyn.balancing_speed_advice(
        "soft", 300.0, proposed_speed_rpm=1000.0, max_permitted_speed_rpm=3000.0
    )
    assert good.speed_ok is True and good.warnings == []
    assert any("permitted speed" in c for c in good.cautions)


def test_hard_bearing_advice() -> None:
    # Common practice: hard-bearing machines at ≤ 1/3 of the suspension resonance.
    adv = dyn.balancing_speed_advice("hard", 3000.0, proposed_speed_rpm=1500.0)
    assert_allclose(adv.recommended_max_rpm, 1000.0)
    assert adv.speed_ok is False
    ok = dyn.balancing_speed_advice(
        "hard", 3000.0, proposed_speed_rpm=800.0, max_permitted_speed_rpm=5000.0
    )
    assert ok.speed_ok is True


def test_over_speed_is_refused() -> None:
    # Safety: never exceed the rotor's permitted speed (machine maker's limits).
    adv = dyn.balancing_speed_advice(
        "soft", 200.0, proposed_speed_rpm=2500.0, max_permitted_speed_rpm=2000.0
    )
    assert adv.speed_ok is False
    assert any("over-speed" in w for w in adv.warnings)
    assert adv.recommended_max_rpm == 2000.0


def test_soft_bearing_limit_below_supercritical_warns() -> None:
    adv = dyn.balancing_speed_advice("soft", 600.0, max_permitted_speed_rpm=900.0)
    assert any("hard-bearing" in w for w in adv.warnings)


@pytest.mark.parametrize(
    ("call", "field"),
    [
        (lambda: dyn.rigid_or_flexible(0.0, 1000.0), "service_speed_rpm"),
        (lambda: dyn.rigid_or_flexible(1000.0, float("nan")), "first_critical_rpm"),
        (lambda: dyn.rigid_or_flexible(1000.0, 2000.0, threshold=1.5), "threshold"),
        (lambda: dyn.jeffcott_response(-1.0, 0.1), "speed_ratio"),
        (lambda: dyn.jeffcott_response(float("inf"), 0.1), "speed_ratio"),
        (lambda: dyn.jeffcott_response(1.0, -0.1), "damping_ratio"),
        (lambda: dyn.jeffcott_response(1.0, 0.0), "speed_ratio"),
        (lambda: dyn.jeffcott_response([1.0, 2.0], [0.1, 0.1, 0.1]), "damping_ratio"),
        (lambda: dyn.balancing_speed_advice("wobbly", 300.0), "machine_type"),
        (lambda: dyn.balancing_speed_advice("soft", 0.0), "suspension_resonance_rpm"),
        (
            lambda: dyn.balancing_speed_advice("soft", 300.0, proposed_speed_rpm=-5.0),
            "proposed_speed_rpm",
        ),
        (
            lambda: dyn.balancing_speed_advice("hard", 300.0, max_permitted_speed_rpm=0.0),
            "max_permitted_speed_rpm",
        ),
    ],
)
def test_bad_input_names_the_field(call, field) -> None:
    with pytest.raises(BalancingInputError) as err:
        call()
    assert err.value.field == field


def test_a_balancing_speed_at_or_above_the_first_critical_is_named_as_such() -> None:
    # Common practice, no source: a rigid-rotor balance stays below about 70 % of the
    # first bending critical; a speed at or above the critical itself is a different,
    # graver case (the rotor bends and passes through resonance on the way up).
    above = dyn.balancing_speed_advice("soft", 200.0, proposed_speed_rpm=1000.0,
                                       max_permitted_speed_rpm=1500.0, first_critical_rpm=900.0)
    assert above.speed_ok is False
    assert any("at or above the first bending critical speed (900 rpm)" in w
               for w in above.warnings)
    near = dyn.balancing_speed_advice("soft", 200.0, proposed_speed_rpm=700.0,
                                      max_permitted_speed_rpm=1500.0, first_critical_rpm=900.0)
    assert near.speed_ok is False
    assert any("above 70 % of the first bending critical speed (630 rpm)" in w
               for w in near.warnings)
    assert not any("at or above" in w for w in near.warnings)
