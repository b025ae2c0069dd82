"""Influence-coefficient balancing checked against hand arithmetic, the graphical
vector method and scipy as an independent solver."""

from __future__ import annotations

import cmath
import math

import numpy as np
import pytest
import scipy.constants
import scipy.linalg
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.influence import (
    TrialRun,
    correction_from_coefficients,
    influence_coefficients,
    mass_at_radius,
    multi_plane,
    predict_residual,
    single_plane,
    solve_two_plane_batch,
    trial_mass_advice,
    two_plane,
)
from shopapp.balancing.phasors import phasor


def _plant_trials(a: np.ndarray, u: np.ndarray, masses: list[complex], procedure: str = "removed"):
    """Readings of a linear plant V = A·(U + W) for one trial per plane."""
    v0 = a @ u
    trials = []
    attached = np.zeros(a.shape[1], dtype=complex)
    for j, t in enumerate(masses):
        if procedure == "removed":
            attached = np.zeros(a.shape[1], dtype=complex)
        attached[j] = t
        v = a @ (u + attached)
        mass, angle = abs(t), math.degrees(cmath.phase(t))
        trials.append(TrialRun(plane=j + 1, mass_g=mass, angle_deg=angle, readings=tuple(v)))
    return v0, trials


# ------------------------------------------------------------------ single plane


def test_single_plane_hand_worked_example() -> None:
    # Worked by hand (common practice, no source): V0 = 10∠0°, T = 10 g∠0°, V1 = 10∠90°.
    # H = (10i - 10)/10 = -1 + i;  W = -10/(-1 + i) = 5 + 5i  ->  7.071 g at 45°.
    r = single_plane(phasor(10, 0), 10.0, 0.0, phasor(10, 90))
    assert r.correction_mass_g == pytest.approx(7.0710678, rel=1e-7)
    assert r.correction_angle_deg == pytest.approx(45.0, abs=1e-9)
    assert r.coefficient == pytest.approx(-1 + 1j)
    assert r.warnings == ()


def test_single_plane_agrees_with_the_graphical_vector_method() -> None:
    # The graphical (triangle) construction of single-plane balancing with phase,
    # as taught in Wowk, "Machinery Vibration: Balancing" (method from memory; the
    # numbers are an invented example). Independent arithmetic: law of cosines only.
    o_amp, o_deg = 6.5, 40.0       # initial run, mm/s
    ot_amp, ot_deg = 9.2, 110.0    # with 15 g trial at 0°
    trial_g, trial_deg = 15.0, 0.0
    delta = math.radians(ot_deg - o_deg)
    t_amp = math.sqrt(o_amp**2 + ot_amp**2 - 2 * o_amp * ot_amp * math.cos(delta))
    gamma = math.degrees(math.acos((o_amp**2 + t_amp**2 - ot_amp**2) / (2 * o_amp * t_amp)))
    expected_mass = trial_g * o_amp / t_amp
    expected_angle = trial_deg + gamma  # move the trial by the angle between T-effect and -O

    r = single_plane(phasor(o_amp, o_deg), trial_g, trial_deg, phasor(ot_amp, ot_deg))
    assert r.correction_mass_g == pytest.approx(expected_mass, rel=1e-10)
    assert r.correction_angle_deg == pytest.approx(expected_angle, abs=1e-8)


def test_single_plane_warns_when_the_trial_changed_too_little() -> None:
    # Rule: < 30 % amplitude and < 30° phase change (common practice, no source).
    small = single_plane(phasor(10, 0), 5.0, 0.0, phasor(11, 10))
    assert any("30 %" in w for w in small.warnings)
    assert small.trial_amplitude_change == pytest.approx(0.1)
    assert small.trial_phase_change_deg == pytest.approx(10.0)
    by_phase = single_plane(phasor(10, 0), 5.0, 0.0, phasor(10.5, 40))
    assert by_phase.warnings == ()
    by_amplitude = single_plane(phasor(10, 0), 5.0, 0.0, phasor(14, 5))
    assert by_amplitude.warnings == ()


def test_single_plane_warns_when_the_correction_is_more_than_the_rotor_takes() -> None:
    r = single_plane(phasor(10, 0), 10.0, 0.0, phasor(10, 90), max_mass_g=5.0)
    assert any("5 g" in w for w in r.warnings)


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        ({"initial": complex(math.nan, 0)}, "initial"),
        ({"initial": complex(math.inf, 0)}, "initial"),
        ({"trial_mass_g": 0.0}, "trial.mass_g"),
        ({"trial_mass_g": -2.0}, "trial.mass_g"),
        ({"trial_mass_g": math.nan}, "trial.mass_g"),
        ({"trial_angle_deg": math.inf}, "trial.angle_deg"),
        ({"trial_reading": phasor(10, 0)}, "trial.reading"),  # identical to the initial run
        ({"max_mass_g": 0.0}, "max_mass_g"),
    ],
)
def test_single_plane_bad_input_names_the_field(kwargs: dict, field: str) -> None:
    args = {"initial": phasor(10, 0), "trial_mass_g": 10.0, "trial_angle_deg": 0.0,
            "trial_reading": phasor(10, 90)}
    args.update(kwargs)
    with pytest.raises(BalancingInputError) as err:
        single_plane(args.pop("initial"), args.pop("trial_mass_g"), args.pop("trial_angle_deg"),
                     args.pop("trial_reading"), **args)
    assert err.value.field == field


# ------------------------------------------------------------------ two planes

A_TRUE = np.array([[0.8 * np.exp(1j * 0.3), 0.25 * np.exp(-1j * 1.1)],
                   [0.3 * np.exp(1j * 2.0), 0.9 * np.exp(-1j * 0.4)]])
U_TRUE = np.array([12 * np.exp(1j * 0.7), 7 * np.exp(1j * 4.0)])  # grams at trial radius


@pytest.mark.parametrize("procedure", ["removed", "left_on"])
def test_two_plane_matches_scipy_solve(procedure: str) -> None:
    v0, trials = _plant_trials(A_TRUE, U_TRUE, [phasor(10, 0), phasor(8, 90)], procedure)
    sol = two_plane(v0, trials, procedure=procedure)
    # Independent solver: scipy.linalg.solve on the plant's own matrix.
    expected = scipy.linalg.solve(A_TRUE, -v0)
    got = np.array([c.vector_g for c in sol.corrections])
    np.testing.assert_allclose(got, expected, rtol=1e-10)
    np.testing.assert_allclose(sol.matrix(), A_TRUE, rtol=1e-10)
    assert sol.condition_number == pytest.approx(np.linalg.cond(A_TRUE), rel=1e-10)
    assert sol.predicted_residual_max < 1e-10
    assert [c.plane for c in sol.corrections] == [1, 2]


def test_trial_order_does_not_matter_for_removed_trials() -> None:
    v0, trials = _plant_trials(A_TRUE, U_TRUE, [phasor(10, 0), phasor(8, 90)])
    a = two_plane(v0, trials)
    b = two_plane(v0, list(reversed(trials)))
    np.testing.assert_allclose([c.vector_g for c in a.corrections],
                               [c.vector_g for c in b.corrections], rtol=1e-12)


def test_left_on_data_misread_as_removed_gives_a_wrong_matrix() -> None:
    # The procedure flag matters: it is not silently ignored.
    v0, trials = _plant_trials(A_TRUE, U_TRUE, [phasor(10, 0), phasor(8, 90)], "left_on")
    wrong = influence_coefficients(v0, trials, procedure="removed").matrix()
    assert not np.allclose(wrong, A_TRUE)


def test_least_squares_matches_scipy_lstsq_for_more_readings_than_planes() -> None:
    rng = np.random.default_rng(7)
    a = rng.normal(size=(6, 2)) + 1j * rng.normal(size=(6, 2))
    v0, trials = _plant_trials(a, U_TRUE, [phasor(10, 0), phasor(10, 0)])
    # Inconsistent readings (measurement noise) so that least squares has work to do.
    noise = 0.05 * (rng.normal(size=6) + 1j * rng.normal(size=6))
    v0_noisy = v0 + noise
    sol = correction_from_coefficients(a, v0_noisy)
    expected = scipy.linalg.lstsq(a, -v0_noisy)[0]
    got = np.array([c.vector_g for c in sol.corrections])
    np.testing.assert_allclose(got, expected, rtol=1e-10)
    np.testing.assert_allclose(sol.predicted_residual, a @ expected + v0_noisy, atol=1e-12)
    assert sol.predicted_residual_max > 0.01
    # Same result through the trial-run route (coefficients estimated exactly here).
    via_trials = multi_plane(v0, trials)
    np.testing.assert_allclose([c.vector_g for c in via_trials.corrections], -U_TRUE, rtol=1e-10)


def test_predicted_residual_for_a_rounded_correction_matches_the_plant() -> None:
    v0, trials = _plant_trials(A_TRUE, U_TRUE, [phasor(10, 0), phasor(8, 90)])
    sol = two_plane(v0, trials)
    applied = [phasor(round(c.mass_g * 2) / 2, round(c.angle_deg / 5) * 5)
               for c in sol.corrections]
    pred = predict_residual(sol.coefficients, v0, applied, tolerance_reading=1e-6)
    # The plant itself with the rounded masses fitted.
    plant = A_TRUE @ (U_TRUE + np.array(applied))
    np.testing.assert_allclose(pred.readings, plant, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(pred.unbalance_g, U_TRUE + np.array(applied), atol=1e-10)
    assert pred.within_tolerance is False
    assert any("tolerance" in w for w in pred.warnings)
    loose = predict_residual(sol.coefficients, v0, applied, tolerance_reading=10.0)
    assert loose.within_tolerance is True


def test_two_plane_warns_when_ill_conditioned_and_refuses_when_singular() -> None:
    # Condition number 2-norm, as numpy.linalg.cond; warning above 100 is a judgement.
    a = np.array([[1.0, 1.0], [1.0, 1.002]], dtype=complex)
    v0, trials = _plant_trials(a, U_TRUE, [phasor(10, 0), phasor(10, 0)])
    sol = two_plane(v0, trials)
    assert sol.condition_number == pytest.approx(np.linalg.cond(a), rel=1e-6)
    assert sol.condition_number > 100
    assert any("ill-conditioned" in w for w in sol.warnings)
    singular = np.array([[1.0, 2.0], [0.5, 1.0]], dtype=complex)
    v0, trials = _plant_trials(singular, U_TRUE, [phasor(10, 0), phasor(10, 0)])
    with pytest.raises(BalancingInputError) as err:
        two_plane(v0, trials)
    assert err.value.field == "trials"
    with pytest.raises(BalancingInputError) as err:
        correction_from_coefficients(singular, v0)
    assert err.value.field == "coefficients"


def test_two_plane_warns_about_small_trial_effect_and_tolerance() -> None:
    a = np.array([[0.01, 0.002], [0.002, 0.01]], dtype=complex)
    u = np.array([100.0, 80j])
    v0, trials = _plant_trials(a, u, [phasor(5, 0), phasor(5, 0)])
    sol = two_plane(v0, trials, max_mass_g=50.0)
    assert any("Trial run 1" in w for w in sol.warnings)
    assert any("Trial run 2" in w for w in sol.warnings)
    assert any("Plane 1" in w and "larger" in w for w in sol.warnings)


@pytest.mark.parametrize(
    ("mutate", "field"),
    [
        (lambda v0, t: ([v0[0]], t), "initial"),                       # fewer readings than planes
        (lambda v0, t: ([math.nan, v0[1]], t), "initial"),
        (lambda v0, t: (v0, [t[0], TrialRun(2, 0.0, 0.0, t[1].readings)]), "trials[1].mass_g"),
        (lambda v0, t: (v0, [t[0], TrialRun(2, -1.0, 0.0, t[1].readings)]), "trials[1].mass_g"),
        (lambda v0, t: (v0, [t[0], TrialRun(2, 8.0, 90.0, tuple(v0))]), "trials[1].readings"),
        (lambda v0, t: (v0, [t[0], TrialRun(1, 8.0, 90.0, t[1].readings)]), "trials[1].plane"),
        (lambda v0, t: (v0, [t[0], TrialRun(2, 8.0, 90.0, (1 + 0j,))]), "trials[1].readings"),
        (lambda v0, t: (v0, [t[0], TrialRun(2, 8.0, math.nan, t[1].readings)]),
         "trials[1].angle_deg"),
        (lambda v0, t: (v0, t[:1]), "trials"),
    ],
)
def test_two_plane_bad_input_names_the_field(mutate, field: str) -> None:
    v0, trials = _plant_trials(A_TRUE, U_TRUE, [phasor(10, 0), phasor(8, 90)])
    v0b, trials_b = mutate(list(v0), trials)
    with pytest.raises(BalancingInputError) as err:
        two_plane(v0b, trials_b)
    assert err.value.field == field


def test_left_on_trial_identical_to_previous_run_is_refused() -> None:
    v0, trials = _plant_trials(A_TRUE, U_TRUE, [phasor(10, 0), phasor(8, 90)], "left_on")
    same = [trials[0], TrialRun(2, 8.0, 90.0, trials[0].readings)]
    with pytest.raises(BalancingInputError) as err:
        two_plane(v0, same, procedure="left_on")
    assert err.value.field == "trials[1].readings"
    with pytest.raises(BalancingInputError) as err:
        two_plane(v0, trials, procedure="sideways")
    assert err.value.field == "procedure"


@settings(max_examples=150, deadline=None)
@given(
    n_readings=st.integers(1, 5),
    n_planes=st.integers(1, 3),
    seed=st.integers(0, 2**32 - 1),
    procedure=st.sampled_from(["removed", "left_on"]),
)
def test_property_correction_cancels_any_well_conditioned_linear_plant(
    n_readings: int, n_planes: int, seed: int, procedure: str
) -> None:
    # Property (linear superposition, the model's own premise): V = A·(U + W) -> W = -U.
    assume(n_readings >= n_planes)
    rng = np.random.default_rng(seed)
    a = rng.normal(size=(n_readings, n_planes)) + 1j * rng.normal(size=(n_readings, n_planes))
    assume(np.linalg.cond(a) < 50)
    u = (rng.normal(size=n_planes) + 1j * rng.normal(size=n_planes)) * 20
    masses = [phasor(rng.uniform(5, 20), rng.uniform(0, 360)) for _ in range(n_planes)]
    v0, trials = _plant_trials(a, u, masses, procedure)
    sol = multi_plane(v0, trials, procedure=procedure)
    w = np.array([c.vector_g for c in sol.corrections])
    np.testing.assert_allclose(a @ (u + w), 0, atol=1e-8 * np.max(np.abs(v0)))
    np.testing.assert_allclose(w, -u, atol=1e-8 * np.max(np.abs(u)))


# ------------------------------------------------------------------ batch


def test_batch_matches_numpy_linalg_solve() -> None:
    rng = np.random.default_rng(1)
    n = 500
    a = rng.normal(size=(n, 2, 2)) + 1j * rng.normal(size=(n, 2, 2))
    v0 = rng.normal(size=(n, 2)) + 1j * rng.normal(size=(n, 2))
    out = solve_two_plane_batch(a, v0, on_singular="mask")
    expected = np.linalg.solve(a, -v0[..., None])[..., 0]
    ok = np.linalg.cond(a) <= 1e8
    assert np.array_equal(out.solvable, ok)
    np.testing.assert_allclose(out.corrections[ok], expected[ok], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(out.condition_number, np.linalg.cond(a), rtol=1e-7)


def test_batch_singular_rows_raise_with_the_row_index_or_are_masked() -> None:
    a = np.tile(A_TRUE, (4, 1, 1))
    a[2] = [[1, 2], [2, 4]]
    v0 = np.tile(A_TRUE @ U_TRUE, (4, 1))
    with pytest.raises(BalancingInputError) as err:
        solve_two_plane_batch(a, v0)
    assert err.value.field == "coefficients[2]"
    out = solve_two_plane_batch(a, v0, on_singular="mask")
    assert out.solvable.tolist() == [True, True, False, True]
    assert np.all(out.corrections[2] == 0)
    assert out.condition_number[2] == np.inf
    np.testing.assert_allclose(out.corrections[0], -U_TRUE, rtol=1e-10)


@pytest.mark.parametrize(
    ("a", "v", "field"),
    [
        (np.full((2, 2, 2), np.nan), np.zeros((2, 2)), "coefficients"),
        (np.ones((2, 2, 2)), np.full((2, 2), np.inf), "initial"),
        (np.ones((2, 3, 2)), np.zeros((2, 2)), "coefficients"),
        (np.ones((2, 2, 2)), np.zeros((3, 2)), "initial"),
    ],
)
def test_batch_bad_input_names_the_field(a: np.ndarray, v: np.ndarray, field: str) -> None:
    with pytest.raises(BalancingInputError) as err:
        solve_two_plane_batch(a, v)
    assert err.value.field == field


# ------------------------------------------------------------------ trial mass, radius


def test_trial_mass_advice_by_centrifugal_force_rule() -> None:
    # Rule: centrifugal force 10 % of the static load (common practice, no source).
    # Independent arithmetic: F = m·r·Ω² with scipy.constants.g.
    r = trial_mass_advice(100.0, 3000.0, 200.0)
    omega = 3000.0 * 2 * math.pi / 60
    expected_kg = 0.10 * 100.0 * scipy.constants.g / (0.200 * omega**2)
    assert r.mass_g == pytest.approx(expected_kg * 1000, rel=1e-12)
    assert r.mass_g == pytest.approx(4.968, rel=1e-3)  # hand arithmetic
    two = trial_mass_advice(100.0, 3000.0, 200.0, planes=2)
    assert two.mass_g == pytest.approx(r.mass_g / 2, rel=1e-12)
    text = " ".join(r.cautions).lower()
    for phrase in ("guard", "plane of rotation", "speed", "securely"):
        assert phrase in text
    assert "common practice" in r.rule


@pytest.mark.parametrize(
    ("args", "field"),
    [
        ((0.0, 3000.0, 200.0), "rotor_mass_kg"),
        ((100.0, -1.0, 200.0), "speed_rpm"),
        ((100.0, 3000.0, math.nan), "radius_mm"),
    ],
)
def test_trial_mass_advice_bad_input(args: tuple, field: str) -> None:
    with pytest.raises(BalancingInputError) as err:
        trial_mass_advice(*args)
    assert err.value.field == field


def test_mass_at_radius_keeps_the_unbalance() -> None:
    # U = m·r (definition of unbalance, ISO 21940-2 vocabulary): 10 g at 100 mm = 5 g at 200 mm.
    assert mass_at_radius(10.0, 100.0, 200.0) == pytest.approx(5.0)
    with pytest.raises(BalancingInputError) as err:
        mass_at_radius(10.0, 0.0, 200.0)
    assert err.value.field == "from_radius_mm"
    with pytest.raises(BalancingInputError) as err:
        mass_at_radius(-1.0, 100.0, 200.0)
    assert err.value.field == "mass_g"
