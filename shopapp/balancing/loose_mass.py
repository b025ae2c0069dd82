"""Loose-mass (ball or bead) automatic balancer: is it able to balance, where, when, how fast.

The model, its equations and the definitions (``ω_n = √(k/(M + n·m))``, support
damping ratio ``ζ = c/(2·√(k·(M + n·m)))``, drag ratio ``ζ_b = D/(2·m·ω_n)``, ball
angles from the unbalance in the direction of rotation, capacity ``n·m·R``
against ``U``) are in :mod:`shopapp.balancing.loose_mass_model`. This module
checks a balancer at an operating speed:

* stability of the balanced state from the eigenvalues of the equations
  linearised about it at constant speed (directions along the family of
  balanced states, which have zero eigenvalues, are projected out); stable
  when every other eigenvalue has a negative real part (Lyapunov's indirect
  method). The literature's result (Thearle 1950, "Automatic dynamic
  balancers", Machine Design; Chung & Ro 1999, "Dynamic analysis of an
  automatic dynamic balancer for rotating mechanisms", J. Sound Vib. — from
  memory): for small damping the balanced state is stable only above the
  support's natural frequency; below it the masses gather on the heavy side and
  add to the unbalance;
* the stable speed bands (scan and bisection);
* a time simulation of a run-up (:func:`scipy.integrate.solve_ivp`) with and
  without the balancer (masses locked in an evenly spaced ring: a plain Jeffcott
  rotor of mass ``M + n·m`` and eccentricity ``U/(M + n·m)``);
* with rolling resistance, the dead band it leaves: the masses stop moving once
  the whirl's pull on them no longer beats the resistance, at a whirl of about
  ``c_rr·R``; the residual unbalance that keeps that whirl at ``r = Ω/ω_n`` is
  ``U_dead ≈ M_t·c_rr·R·|1 − r² + 2iζr| / r²`` (our estimate, for a mass at
  right angles to the whirl; masses near the line of the whirl can stop with
  more).

Safety: a loose-mass balancer makes the rotor worse below and while passing
through the resonance, and its masses are loose parts that can be thrown if the
race or its cover fails (:data:`LOOSE_MASS_CAUTIONS`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.integrate import solve_ivp
from scipy.linalg import null_space

from shopapp.balancing.checks import finite_array, positive
from shopapp.balancing.dynamics import jeffcott_response
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.loose_mass_model import (
    LooseMassBalancer,
    balanced_ball_angles_deg,
    equilibrium_state,
    jacobian,
    loose_mass_balancer,
    motion_params,
    rhs,
    ring_deg,
)
from shopapp.balancing.phasors import normalize_deg

__all__ = [
    "LOOSE_MASS_CAUTIONS",
    "LooseMassBalancer",
    "LooseMassCurves",
    "LooseMassResult",
    "RunUpSimulation",
    "StabilityCheck",
    "analyse_loose_mass",
    "balanced_ball_angles_deg",
    "balanced_state_stability",
    "dead_band_gmm",
    "loose_mass_balancer",
    "loose_mass_curves",
    "plain_whirl_um",
    "simulate_run_up",
    "stable_speed_bands_rpm",
]

RESERVE_WARN = 1.25  # judgement, no source: capacity below 1.25 × U leaves little reserve
SETTLE_BAND = 0.02  # settled: residual unbalance within 2 % of U of its end value (our choice)
DEFAULT_RAMP_PERIODS = 50.0  # default run-up: 50 natural periods (our choice)
MIN_HOLD_PERIODS = 100.0
MAX_HOLD_PERIODS = 600.0
MAX_SIM_PERIODS = 3000.0
SCAN_POINTS = 120
STABLE_EPS = 1e-9  # largest real part (per unit ω_n time) still counted as decaying
SAMPLES = 1200

LOOSE_MASS_CAUTIONS = (
    "A loose-mass balancer only works above the support's resonance: below it and while "
    "passing through it the masses add to the unbalance. Pass through the resonance briskly "
    "and never dwell near it.",
    "The masses are loose parts: check the race, its cover and its fixing before every run and "
    "keep clear of the plane of rotation; a failed race throws them out.",
    "Never run above the rotor's permitted speed or its machine maker's limits (over-speed). "
    "Local codes, the machine maker's instructions and licensed practice take precedence over "
    "this advice.",
)


@dataclass(frozen=True)
class StabilityCheck:
    """Linear stability of the balanced state at one speed.

    ``eigenvalues_per_s`` are those of the linearised equations (1/s), the
    neutral ones along the family of balanced states left out;
    ``slowest_decay_per_s`` is −max Re λ (negative when unstable) and
    ``settle_estimate_s`` ≈ ln(100)/slowest decay, the time for a small upset to
    shrink a hundredfold (None when unstable).
    """

    speed_rpm: float
    stable: bool
    eigenvalues_per_s: tuple[complex, ...]
    slowest_decay_per_s: float
    settle_estimate_s: float | None


def _stability_at(b: LooseMassBalancer, angles_deg: Sequence[float], spd: float) -> np.ndarray:
    """Eigenvalues (per unit ω_n·t) of the balanced state at Ω/ω_n = spd."""
    p = motion_params(b, friction=False)
    y0 = equilibrium_state(b, angles_deg)
    jac = jacobian(y0, spd, p)
    n = b.ball_count
    phi = y0[4 : 4 + n]
    grad = np.vstack([-np.sin(phi), np.cos(phi)])  # ∂(Σ e^{iφ})/∂φ, real and imaginary rows
    tangent_phi = null_space(grad, rcond=1e-9)
    if tangent_phi.size:
        tangent = np.zeros((y0.size, tangent_phi.shape[1]))
        tangent[4 : 4 + n] = tangent_phi
        jac = null_space(tangent.T).T @ jac @ null_space(tangent.T)
    return np.linalg.eigvals(jac)


def balanced_state_stability(balancer: LooseMassBalancer, speed_rpm: float) -> StabilityCheck:
    """Whether the balanced state is stable at ``speed_rpm`` (constant speed).

    Eigenvalues of the equations of motion (module docstring) linearised about
    the balanced state by central differences; stable when ``max Re λ < 0``
    (Lyapunov's indirect method). Rolling resistance is left out here.

    Raises
    ------
    BalancingInputError
        On ``"capacity"`` when ``n·m·R < U`` (there is no balanced state).
    """
    speed = positive("speed_rpm", speed_rpm)
    angles = balanced_ball_angles_deg(balancer)
    if angles is None:
        raise BalancingInputError(
            "capacity", "the masses cannot balance this unbalance (n·m·R < U): no balanced state"
        )
    wn = balancer.omega_n_rad_s
    lam = _stability_at(balancer, angles, speed * math.pi / 30.0 / wn) * wn
    top = float(np.max(lam.real))
    stable = top < -STABLE_EPS * wn
    return StabilityCheck(
        speed_rpm=speed,
        stable=stable,
        eigenvalues_per_s=tuple(complex(x) for x in lam),
        slowest_decay_per_s=-top,
        settle_estimate_s=math.log(100.0) / -top if stable else None,
    )


def stable_speed_bands_rpm(
    balancer: LooseMassBalancer, max_speed_rpm: float | None = None
) -> list[tuple[float, float]]:
    """Speed bands in which the balanced state is stable, by scanning and bisection.

    Scans :data:`SCAN_POINTS` speeds spaced geometrically from 0.05·ω_n to
    ``max_speed_rpm`` (default 4·ω_n) with the test of
    :func:`balanced_state_stability`, then bisects every change of verdict to
    0.01 % of the speed. A band ending at the scan limit may go on above it.
    Empty when the capacity is too small.
    """
    angles = balanced_ball_angles_deg(balancer)
    if angles is None:
        return []
    wn = balancer.omega_n_rad_s
    to_rpm = wn * 30.0 / math.pi
    top = 4.0 if max_speed_rpm is None else positive("max_speed_rpm", max_speed_rpm) / to_rpm
    if top <= 0.05:
        raise BalancingInputError("max_speed_rpm", "must be above 5 % of the natural frequency")

    def stable(s: float) -> bool:
        return bool(np.max(_stability_at(balancer, angles, s).real) < -STABLE_EPS)

    grid = np.geomspace(0.05, top, SCAN_POINTS)
    verdict = [stable(s) for s in grid]
    edges: list[float] = []
    for j in range(1, grid.size):
        if verdict[j] != verdict[j - 1]:
            lo, hi = grid[j - 1], grid[j]
            while hi - lo > 1e-4 * hi:
                mid = 0.5 * (lo + hi)
                if stable(mid) == verdict[j - 1]:
                    lo = mid
                else:
                    hi = mid
            edges.append(0.5 * (lo + hi))
    bands: list[tuple[float, float]] = []
    start = grid[0] if verdict[0] else None
    for x in edges:
        if start is None:
            start = x
        else:
            bands.append((float(start * to_rpm), float(x * to_rpm)))
            start = None
    if start is not None:
        bands.append((float(start * to_rpm), float(top * to_rpm)))
    return bands


# --------------------------------------------------------------------------- time simulation


@dataclass(frozen=True)
class RunUpSimulation:
    """Time simulation of a run-up to ``speed_rpm`` and a hold at that speed.

    Arrays share ``time_s``; ``ball_angles_deg`` has one row per mass (continuous,
    not wrapped); ``residual_history_gmm`` is the unbalance left by the masses at
    each time, ``|U + m·R·Σ e^{iφ}|``, and ``residual_gmm`` its end value.
    ``settle_time_s`` counts from the start: the time after which that residual
    stays within 2 % of U of its end value; None when it was still changing at
    the end. ``whirl_end_um`` is the whirl amplitude at the end. For ``locked``
    (masses held in an evenly spaced ring, i.e. no balancer) the masses' fields
    are empty and the residual is U throughout.
    """

    speed_rpm: float
    ramp_time_s: float
    hold_time_s: float
    locked: bool
    time_s: np.ndarray
    speed_profile_rpm: np.ndarray
    whirl_um: np.ndarray
    ball_angles_deg: np.ndarray
    residual_history_gmm: np.ndarray
    settle_time_s: float | None
    whirl_end_um: float
    residual_gmm: float
    end_ball_angles_deg: tuple[float, ...]


def simulate_run_up(
    balancer: LooseMassBalancer,
    speed_rpm: float,
    *,
    ramp_time_s: float | None = None,
    hold_time_s: float | None = None,
    initial_ball_angles_deg: Sequence[float] | None = None,
    locked: bool = False,
) -> RunUpSimulation:
    """Integrate a linear run-up from rest to ``speed_rpm`` and a hold there.

    The full nonlinear equations of :mod:`shopapp.balancing.loose_mass_model`,
    in the rotor frame, are integrated with :func:`scipy.integrate.solve_ivp` (RK45; LSODA when
    there is rolling resistance, which makes them stiff). Speed
    ``Ω(t) = Ω_op·min(t / t_ramp, 1)``.

    Parameters
    ----------
    balancer : LooseMassBalancer
        From :func:`loose_mass_balancer`.
    speed_rpm : float
        Operating speed, > 0.
    ramp_time_s : float, optional
        Duration of the run-up, > 0; default 50 natural periods.
    hold_time_s : float, optional
        Time at speed after the run-up, > 0; default from the settling estimate
        of the linearised equations (3 × the time for a small upset to shrink
        a hundredfold), 100 … 600 natural periods.
    initial_ball_angles_deg : sequence of float, optional
        Where the masses start; default evenly spaced about the light side.
    locked : bool
        Hold the masses in an evenly spaced ring: the rotor without a balancer.
    """
    b = balancer
    speed = positive("speed_rpm", speed_rpm)
    wn = b.omega_n_rad_s
    period = 2.0 * math.pi / wn
    ramp = (
        DEFAULT_RAMP_PERIODS * period
        if ramp_time_s is None
        else positive("ramp_time_s", ramp_time_s)
    )
    if hold_time_s is None:
        hold = MIN_HOLD_PERIODS * period
        if not locked and balanced_ball_angles_deg(b) is not None:
            check = balanced_state_stability(b, speed)
            if check.settle_estimate_s is not None:
                hold = max(hold, 3.0 * check.settle_estimate_s)
        hold = min(hold, MAX_HOLD_PERIODS * period)
    else:
        hold = positive("hold_time_s", hold_time_s)
    if (ramp + hold) / period > MAX_SIM_PERIODS:
        raise BalancingInputError(
            "hold_time_s",
            f"the simulated run is too long (over {MAX_SIM_PERIODS:.0f} natural periods)",
        )
    n = b.ball_count
    if initial_ball_angles_deg is None:
        start = ring_deg(n)
    else:
        start = finite_array("initial_ball_angles_deg", initial_ball_angles_deg)
        if start.shape != (n,) or start.dtype.kind == "c":
            raise BalancingInputError("initial_ball_angles_deg", f"must list {n} angles")
    p = motion_params(b, locked=locked)
    spd_op = speed * math.pi / 30.0 / wn
    tau_ramp, tau_hold = ramp * wn, hold * wn
    acc = spd_op / tau_ramp
    y0 = np.zeros(4 + 2 * n)
    y0[4 : 4 + n] = np.radians(start) if not locked else np.radians(ring_deg(n))
    method = "LSODA" if (p.c_rr > 0.0 and not locked) else "RK45"
    tol = {"rtol": 1e-5, "atol": 1e-7}  # state scaled: whirl in units of U/M_t, angles in rad

    t_all = np.linspace(0.0, tau_ramp + tau_hold, SAMPLES)
    # The ramp's samples end exactly at its end: the hold starts from that state.
    t1 = np.append(t_all[t_all < tau_ramp], tau_ramp)
    t2 = t_all[t_all > tau_ramp]
    sol1 = solve_ivp(
        lambda t, y: rhs(y, acc * t, acc, p), (0.0, tau_ramp), y0, t_eval=t1, method=method, **tol
    )
    sol2 = solve_ivp(
        lambda t, y: rhs(y, spd_op, 0.0, p),
        (tau_ramp, tau_ramp + tau_hold),
        sol1.y[:, -1],
        t_eval=t2,
        method=method,
        **tol,
    )
    if not (sol1.success and sol2.success):
        raise BalancingInputError("speed_rpm", "the simulation did not converge at these inputs")
    ys = np.hstack([sol1.y, sol2.y])
    ts = np.concatenate([sol1.t, sol2.t])
    whirl = np.hypot(ys[0], ys[1]) * b.whirl_scale_um
    time_s = ts / wn
    profile = np.minimum(ts * acc, spd_op) * wn * 30.0 / math.pi
    if locked:
        angles = np.empty((0, ts.size))
        end_angles: tuple[float, ...] = ()
        residual_t = np.full(ts.size, b.unbalance_gmm)
        settle = None
    else:
        angles = np.degrees(ys[4 : 4 + n])
        end_angles = tuple(normalize_deg(float(a)) for a in angles[:, -1])
        residual_t = np.abs(
            b.unbalance_gmm
            + b.ball_mass_g * b.race_radius_mm * np.sum(np.exp(1j * ys[4 : 4 + n]), axis=0)
        )
        settle = _settle_time(time_s, residual_t, b.unbalance_gmm, hold)
    return RunUpSimulation(
        speed_rpm=speed,
        ramp_time_s=ramp,
        hold_time_s=hold,
        locked=locked,
        time_s=time_s,
        speed_profile_rpm=profile,
        whirl_um=whirl,
        ball_angles_deg=angles,
        residual_history_gmm=residual_t,
        settle_time_s=settle,
        whirl_end_um=float(whirl[-1]),
        residual_gmm=float(residual_t[-1]),
        end_ball_angles_deg=end_angles,
    )


def _settle_time(
    time_s: np.ndarray, residual_gmm: np.ndarray, unbalance_gmm: float, hold_s: float
) -> float | None:
    """First time after which the residual stays within SETTLE_BAND·U of its end value.

    None when the residual still changes by more than half that band over the
    last tenth of the hold (the masses are still moving).
    """
    band = SETTLE_BAND * unbalance_gmm
    tail = time_s >= time_s[-1] - 0.1 * hold_s
    if float(np.ptp(residual_gmm[tail])) > 0.5 * band:
        return None
    outside = np.nonzero(np.abs(residual_gmm - residual_gmm[-1]) > band)[0]
    if outside.size == 0:
        return float(time_s[0])
    return float(time_s[min(int(outside[-1]) + 1, time_s.size - 1)])


# --------------------------------------------------------------------------- steady-state figures


def plain_whirl_um(
    balancer: LooseMassBalancer, speed_rpm: Sequence[float] | np.ndarray | float
) -> np.ndarray:
    """Steady whirl of the rotor without a balancer (masses locked in a ring), µm.

    Plain Jeffcott rotor of mass ``M_t`` and eccentricity ``U / M_t``:
    ``|X| = (U/M_t) · r² / √((1 − r²)² + (2ζr)²)``
    (:func:`shopapp.balancing.dynamics.jeffcott_response`; Rao — from memory).
    """
    speeds = finite_array("speed_rpm", speed_rpm)
    if speeds.dtype.kind == "c" or np.any(speeds < 0.0):
        raise BalancingInputError("speed_rpm", "must be real and not negative")
    r = speeds * math.pi / 30.0 / balancer.omega_n_rad_s
    resp = jeffcott_response(r, balancer.damping_ratio)
    return np.asarray(resp.amplitude_ratio, dtype=float) * balancer.whirl_scale_um


def dead_band_gmm(balancer: LooseMassBalancer, speed_rpm: float) -> float:
    """Residual unbalance that rolling resistance lets stand at ``speed_rpm`` (estimate).

    A mass stops moving once the whirl's tangential pull ``m·|w|·Ω²·|sin γ|``
    (γ between the whirl and the mass) no longer beats the resistance
    ``c_rr·m·R·Ω²``: for a mass at right angles to the whirl, ``|w| = c_rr·R``.
    The residual that keeps that whirl at ``r = Ω/ω_n`` is
    ``U_dead = M_t·c_rr·R·|1 − r² + 2iζr| / r²`` (Jeffcott response inverted;
    our estimate, no source). Masses near the line of the whirl feel less pull
    and can stop with more residual; the time simulation shows what happens.
    """
    speed = positive("speed_rpm", speed_rpm)
    r = speed * math.pi / 30.0 / balancer.omega_n_rad_s
    zeta = balancer.damping_ratio
    return (
        balancer.total_mass_kg
        * balancer.rolling_resistance
        * balancer.race_radius_mm
        * 1e3  # kg·mm → g·mm
        * abs(complex(1.0 - r * r, 2.0 * zeta * r))
        / (r * r)
    )


# --------------------------------------------------------------------------- whole check


@dataclass(frozen=True)
class LooseMassResult:
    """Result of :func:`analyse_loose_mass`.

    ``ball_angles_deg`` is the balanced arrangement (all masses at 180° when the
    capacity is short, the best they can do). ``balanced_state_stable`` is None
    when there is no balanced state. ``stable_band_rpm`` lists the stable bands
    up to ``scan_limit_rpm`` (a band ending there may continue above it).
    ``settle_time_s``, ``residual_gmm`` and ``whirl_end_um`` come from the time
    simulation of the run-up; ``whirl_without_balancer_um`` is the steady whirl
    of the plain rotor at the operating speed and ``dead_band_gmm`` the estimate
    of :func:`dead_band_gmm` (None without rolling resistance).
    """

    balancer: LooseMassBalancer
    speed_rpm: float
    speed_ratio: float
    capacity_ok: bool
    ball_angles_deg: tuple[float, ...]
    balanced_state_stable: bool | None
    stability: StabilityCheck | None
    stable_band_rpm: list[tuple[float, float]]
    scan_limit_rpm: float
    settle_time_s: float | None
    residual_gmm: float
    whirl_end_um: float
    whirl_without_balancer_um: float
    dead_band_gmm: float | None
    simulation: RunUpSimulation
    without_balancer: RunUpSimulation
    warnings: tuple[str, ...]
    cautions: tuple[str, ...]


def analyse_loose_mass(
    balancer: LooseMassBalancer,
    speed_rpm: float,
    *,
    ramp_time_s: float | None = None,
    hold_time_s: float | None = None,
    max_speed_rpm: float | None = None,
) -> LooseMassResult:
    """Check a loose-mass balancer at an operating speed: capacity, positions,
    stability, stable speed bands, and a simulated run-up with and without it.

    See the module docstring for the model and :func:`balanced_ball_angles_deg`,
    :func:`balanced_state_stability`, :func:`stable_speed_bands_rpm`,
    :func:`simulate_run_up` and :func:`dead_band_gmm` for each part.

    Parameters
    ----------
    balancer : LooseMassBalancer
        From :func:`loose_mass_balancer`.
    speed_rpm : float
        Operating speed, > 0.
    ramp_time_s, hold_time_s : float, optional
        Run-up duration and time at speed of the simulation.
    max_speed_rpm : float, optional
        Upper end of the stability scan; default the larger of 4·ω_n and 1.5 ×
        the operating speed.
    """
    b = balancer
    speed = positive("speed_rpm", speed_rpm)
    wn_rpm = b.omega_n_rad_s * 30.0 / math.pi
    ratio = speed / wn_rpm
    warnings: list[str] = []
    angles = balanced_ball_angles_deg(b)
    capacity_ok = angles is not None
    stability = None
    if angles is None:
        warnings.append(
            f"capacity too small: the masses can balance at most {b.capacity_gmm:.0f} g·mm "
            f"(n·m·R), less than the unbalance {b.unbalance_gmm:.0f} g·mm; balance the rotor "
            "first or fit more or heavier masses"
        )
        angles = (180.0,) * b.ball_count
    else:
        if b.capacity_ratio < RESERVE_WARN:
            warnings.append(
                f"the capacity is only {b.capacity_ratio:.2f}× the unbalance: little reserve "
                "for wear, deposits or a lost mass"
            )
        stability = balanced_state_stability(b, speed)
        if not stability.stable:
            warnings.append(
                f"the balanced state is not stable at {speed:.0f} rpm: the masses will not "
                "balance the rotor there"
                + (" (below the resonance they gather on the heavy side)" if ratio < 1 else "")
            )
    limit = max(4.0 * wn_rpm, 1.5 * speed) if max_speed_rpm is None else max_speed_rpm
    bands = stable_speed_bands_rpm(b, limit)
    limit = float(bands[-1][1]) if bands and max_speed_rpm is None else float(limit)
    if 0.8 < ratio < 1.25:
        warnings.append(
            f"the operating speed is {ratio:.2f}× the support's natural frequency "
            f"({wn_rpm:.0f} rpm): close to the resonance"
        )
    sim = simulate_run_up(b, speed, ramp_time_s=ramp_time_s, hold_time_s=hold_time_s)
    plain = simulate_run_up(
        b, speed, ramp_time_s=sim.ramp_time_s, hold_time_s=sim.hold_time_s, locked=True
    )
    if sim.settle_time_s is None:
        warnings.append("the masses had not settled by the end of the simulated run")
    elif stability is not None and stability.stable and sim.residual_gmm > 0.1 * b.unbalance_gmm:
        warnings.append(
            f"the simulated run ended with {sim.residual_gmm:.0f} g·mm residual unbalance "
            "although the balanced state is stable"
            + (" (rolling resistance stops the masses early)" if b.rolling_resistance else "")
        )
    dead = None
    if b.rolling_resistance > 0.0:
        dead = dead_band_gmm(b, speed)
        warnings.append(
            f"rolling resistance leaves a dead band of about {dead:.0f} g·mm residual "
            "unbalance (more when the masses stop near the line of the whirl)"
        )
    return LooseMassResult(
        balancer=b,
        speed_rpm=speed,
        speed_ratio=ratio,
        capacity_ok=capacity_ok,
        ball_angles_deg=tuple(angles),
        balanced_state_stable=None if stability is None else stability.stable,
        stability=stability,
        stable_band_rpm=bands,
        scan_limit_rpm=limit,
        settle_time_s=sim.settle_time_s,
        residual_gmm=sim.residual_gmm,
        whirl_end_um=sim.whirl_end_um,
        whirl_without_balancer_um=float(plain_whirl_um(b, speed)),
        dead_band_gmm=dead,
        simulation=sim,
        without_balancer=plain,
        warnings=tuple(warnings),
        cautions=LOOSE_MASS_CAUTIONS,
    )


@dataclass(frozen=True)
class LooseMassCurves:
    """Figure-ready data of a loose-mass check, as plain lists.

    Time plots share ``time_s``: speed, whirl with and without the balancer,
    residual unbalance and each mass's angle (wrapped to [0, 360)). The steady
    plot: ``speed_rpm`` against the plain rotor's whirl, with the stable bands.
    """

    time_s: list[float]
    speed_profile_rpm: list[float]
    whirl_um: list[float]
    whirl_without_balancer_um: list[float]
    residual_gmm: list[float]
    ball_angles_deg: list[list[float]]
    speed_rpm: list[float]
    steady_whirl_without_balancer_um: list[float]
    stable_band_rpm: list[tuple[float, float]]
    natural_frequency_rpm: float


def loose_mass_curves(result: LooseMassResult, points: int = 300) -> LooseMassCurves:
    """Whirl against time with and without the balancer, and the plain Jeffcott curve."""
    if points < 2:
        raise BalancingInputError("points", "must be at least 2")
    sim, plain, b = result.simulation, result.without_balancer, result.balancer
    speeds = np.linspace(0.0, result.scan_limit_rpm, points)
    # The locked run shares the time grid only when both ran alike; interpolate to be safe.
    plain_whirl = np.interp(sim.time_s, plain.time_s, plain.whirl_um)
    return LooseMassCurves(
        time_s=sim.time_s.tolist(),
        speed_profile_rpm=sim.speed_profile_rpm.tolist(),
        whirl_um=sim.whirl_um.tolist(),
        whirl_without_balancer_um=plain_whirl.tolist(),
        residual_gmm=sim.residual_history_gmm.tolist(),
        ball_angles_deg=[np.mod(row, 360.0).tolist() for row in sim.ball_angles_deg],
        speed_rpm=speeds.tolist(),
        steady_whirl_without_balancer_um=plain_whirl_um(b, speeds).tolist(),
        stable_band_rpm=list(result.stable_band_rpm),
        natural_frequency_rpm=b.natural_frequency_hz * 60.0,
    )
