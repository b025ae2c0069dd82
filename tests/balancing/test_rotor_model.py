"""Independent physical check of the influence-coefficient method.

A rigid rotor (mass m, transverse inertia I_t, polar inertia I_p) on two
anisotropic, damped bearing springs, 4 DOF (x, y of the centre of mass and the
two slopes α = dx/ds, β = dy/ds). Equations of motion (rigid-body dynamics with
the gyroscopic moment of the spin, e.g. Childs, "Turbomachinery Rotordynamics",
or any rotordynamics text — standard form, written from first principles here):

    m ẍ = Σ F_x,            I_t α̈ + I_p Ω β̇ = Σ s·F_x,
    m ÿ = Σ F_y,            I_t β̈ - I_p Ω α̇ = Σ s·F_y,

bearing forces ``F = -k·u(s_b) - c·u̇(s_b)`` and unbalance forces
``F_x + i F_y = Ω² U e^{iΩt}`` at axial position s (U = m·r·e^{iφ}, φ in the
direction of rotation). The steady state is solved with scipy (dynamic
stiffness ``K - Ω² M + iΩ D`` and ``scipy.linalg.solve``) and once by time
integration with ``scipy.integrate.solve_ivp``. None of this uses the code under
test; the code only sees bearing readings.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.integrate
import scipy.linalg

from shopapp.balancing.influence import (
    TrialRun,
    correction_from_coefficients,
    multi_plane,
    two_plane,
)
from shopapp.balancing.phasors import phasor

# Invented rotor: 50 kg steel cylinder, Ø200 mm × 800 mm.
MASS_KG = 50.0
I_T = MASS_KG * (3 * 0.1**2 + 0.8**2) / 12.0  # solid cylinder about a diameter
I_P = MASS_KG * 0.1**2 / 2.0
BEARINGS = (  # (s [m], k_x, k_y [N/m], c_x, c_y [N·s/m])
    (-0.4, 1.0e6, 1.5e6, 500.0, 600.0),
    (0.4, 1.4e6, 2.0e6, 500.0, 600.0),
)
PLANES_M = (-0.3, 0.3)
RADIUS_M = 0.15
# The unbalance to be found, spread over three axial stations (kg·m).
TRUE_UNBALANCE = (
    (-0.2, 0.004 * np.exp(1j * np.radians(30.0))),
    (0.05, 0.002 * np.exp(1j * np.radians(200.0))),
    (0.25, 0.003 * np.exp(1j * np.radians(300.0))),
)


def _matrices(speed_rad_s: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """M, D (damping + gyroscopic) and K for q = [x, y, α, β]."""
    m = np.diag([MASS_KG, MASS_KG, I_T, I_T])
    k = np.zeros((4, 4))
    c = np.zeros((4, 4))
    for s, kx, ky, cx, cy in BEARINGS:
        for (i, j), kk, cc in (((0, 2), kx, cx), ((1, 3), ky, cy)):
            shape = np.array([[1.0, s], [s, s * s]])
            k[np.ix_([i, j], [i, j])] += kk * shape
            c[np.ix_([i, j], [i, j])] += cc * shape
    g = np.zeros((4, 4))
    g[2, 3] = I_P
    g[3, 2] = -I_P
    return m, c + speed_rad_s * g, k


def _force(speed_rad_s: float, unbalances: list[tuple[float, complex]]) -> np.ndarray:
    f = np.zeros(4, dtype=complex)
    for s, u in unbalances:
        f += speed_rad_s**2 * u * np.array([1.0, -1j, s, -1j * s])
    return f


def _readings(q: np.ndarray) -> np.ndarray:
    """Bearing displacements: x at A, x at B, y at A, y at B (complex amplitudes)."""
    (sa, *_), (sb, *_) = BEARINGS
    return np.array([q[0] + sa * q[2], q[0] + sb * q[2], q[1] + sa * q[3], q[1] + sb * q[3]])


def steady_state(speed_rad_s: float, unbalances: list[tuple[float, complex]]) -> np.ndarray:
    m, d, k = _matrices(speed_rad_s)
    dyn = k - speed_rad_s**2 * m + 1j * speed_rad_s * d
    return _readings(scipy.linalg.solve(dyn, _force(speed_rad_s, unbalances)))


def time_domain(speed_rad_s: float, unbalances: list[tuple[float, complex]]) -> np.ndarray:
    """Integrate from rest past the transient and Fourier-project the last periods."""
    m, d, k = _matrices(speed_rad_s)
    f = _force(speed_rad_s, unbalances)
    minv = np.linalg.inv(m)

    def rhs(t: float, y: np.ndarray) -> np.ndarray:
        q, v = y[:4], y[4:]
        load = (f * np.exp(1j * speed_rad_s * t)).real
        return np.concatenate([v, minv @ (load - d @ v - k @ q)])

    period = 2 * np.pi / speed_rad_s
    t_end = 2.5  # > 20 decay time constants of the slowest mode of this rotor
    t_start = t_end - 10 * period
    sol = scipy.integrate.solve_ivp(
        rhs, (0.0, t_end), np.zeros(8), method="DOP853", rtol=1e-10, atol=1e-14,
        dense_output=True,
    )
    t = np.linspace(t_start, t_end, 2000, endpoint=False)
    q = sol.sol(t)[:4]
    amp = 2.0 * np.mean(q * np.exp(-1j * speed_rad_s * t), axis=1)
    return _readings(amp)


def natural_frequencies() -> np.ndarray:
    m, _, k = _matrices(0.0)
    return np.sqrt(scipy.linalg.eigh(k, m, eigvals_only=True))


def _with(extra: list[tuple[float, complex]]) -> list[tuple[float, complex]]:
    return list(TRUE_UNBALANCE) + extra


def _grams_to_unbalance(vector_g: complex) -> complex:
    return vector_g / 1000.0 * RADIUS_M


TRIAL_G = 20.0


def _balance(speed: float, readings_fn, sensors: slice = slice(0, 2)):
    v0 = readings_fn(speed, _with([]))[sensors]
    trials = []
    for plane, s in enumerate(PLANES_M, start=1):
        t = phasor(TRIAL_G, 0.0)
        v = readings_fn(speed, _with([(s, _grams_to_unbalance(t))]))[sensors]
        trials.append(TrialRun(plane=plane, mass_g=TRIAL_G, angle_deg=0.0, readings=tuple(v)))
    return v0, two_plane(v0, trials)


def _equivalent_two_plane_g() -> np.ndarray:
    """Rigid-body statics: U1 + U2 = ΣU, s1·U1 + s2·U2 = Σ s·U (force and moment equivalence)."""
    total = sum(u for _, u in TRUE_UNBALANCE)
    moment = sum(s * u for s, u in TRUE_UNBALANCE)
    s1, s2 = PLANES_M
    u2 = (moment - s1 * total) / (s2 - s1)
    u1 = total - u2
    return np.array([u1, u2]) / RADIUS_M * 1000.0


def _speeds() -> dict[str, float]:
    w = natural_frequencies()
    return {
        "below_resonance": 0.3 * w[0],
        "at_first_resonance": w[0],
        "between_resonances": 0.5 * (w[1] + w[2]),
        "supercritical": 3.0 * w[-1],
    }


@pytest.mark.parametrize("case", ["below_resonance", "at_first_resonance",
                                  "between_resonances", "supercritical"])
def test_two_plane_correction_cancels_the_model_unbalance(case: str) -> None:
    speed = _speeds()[case]
    v0, sol = _balance(speed, steady_state)
    w = np.array([c.vector_g for c in sol.corrections])
    corrected = steady_state(
        speed, _with([(s, _grams_to_unbalance(wi)) for s, wi in zip(PLANES_M, w, strict=True)])
    )
    # Every bearing reading, x and y, vanishes: the rotor is balanced, not just two sensors.
    assert np.max(np.abs(corrected)) <= 1e-9 * np.max(np.abs(v0))
    # And the correction is minus the statically equivalent two-plane unbalance.
    np.testing.assert_allclose(w, -_equivalent_two_plane_g(), rtol=1e-8)


def test_phase_of_the_response_turns_through_resonance() -> None:
    # Below resonance the rotor moves towards the heavy spot (stiffness-controlled),
    # far above it away from it (mass-controlled): ~180° phase shift
    # (single-mass resonance behaviour, e.g. Rao, "Mechanical Vibrations", forced response).
    speeds = _speeds()
    below = _balance(speeds["below_resonance"], steady_state)[1].matrix()[0, 0]
    above = _balance(speeds["supercritical"], steady_state)[1].matrix()[0, 0]
    shift = abs(np.degrees(np.angle(above / below)))
    assert shift > 150.0
    at = _balance(speeds["at_first_resonance"], steady_state)[1].matrix()[0, 0]
    # At resonance the phase is in between (near 90° for light damping).
    assert 30.0 < abs(np.degrees(np.angle(at / below))) < 150.0


def test_least_squares_with_four_sensors_and_two_speeds_cancels_the_unbalance() -> None:
    speeds = _speeds()
    stacked_v0 = []
    columns: list[list[np.ndarray]] = [[], []]
    for speed in (speeds["below_resonance"], speeds["supercritical"]):
        v0 = steady_state(speed, _with([]))
        stacked_v0.append(v0)
        for j, s in enumerate(PLANES_M):
            columns[j].append(steady_state(speed, _with([(s, _grams_to_unbalance(TRIAL_G))])))
    v0 = np.concatenate(stacked_v0)
    trials = [TrialRun(plane=j + 1, mass_g=TRIAL_G, angle_deg=0.0,
                       readings=tuple(np.concatenate(columns[j]))) for j in range(2)]
    sol = multi_plane(v0, trials)
    # A rigid rotor is exactly a two-plane system: the least-squares fit leaves nothing.
    assert sol.predicted_residual_max <= 1e-9 * np.max(np.abs(v0))
    w = np.array([c.vector_g for c in sol.corrections])
    np.testing.assert_allclose(w, -_equivalent_two_plane_g(), rtol=1e-8)


def test_stored_coefficients_correct_a_second_rotor_of_the_same_type() -> None:
    speed = _speeds()["between_resonances"]
    _, sol = _balance(speed, steady_state)
    # A second rotor of the same type with a different unbalance: one initial run only.
    other = [(-0.1, 0.005 * np.exp(1j * np.radians(120.0))), (0.3, 0.001 + 0.002j)]
    v0 = steady_state(speed, other)[:2]
    repeat = correction_from_coefficients(sol.coefficients, v0)
    w = [c.vector_g for c in repeat.corrections]
    after = steady_state(speed, other + [(s, _grams_to_unbalance(wi))
                                         for s, wi in zip(PLANES_M, w, strict=True)])
    assert np.max(np.abs(after)) <= 1e-9 * np.max(np.abs(v0))


def test_time_integration_agrees_with_the_frequency_domain_and_balances() -> None:
    # Independent of the complex-algebra model: scipy.integrate.solve_ivp from rest.
    speed = 0.5 * natural_frequencies()[0]
    np.testing.assert_allclose(
        time_domain(speed, _with([])), steady_state(speed, _with([])), rtol=1e-6
    )
    v0, sol = _balance(speed, time_domain)
    w = [c.vector_g for c in sol.corrections]
    corrected = steady_state(
        speed, _with([(s, _grams_to_unbalance(wi)) for s, wi in zip(PLANES_M, w, strict=True)])
    )
    assert np.max(np.abs(corrected)) <= 1e-5 * np.max(np.abs(v0))
