"""Loose-mass (ball or bead) automatic balancer: inputs, balanced positions, equations of motion.

The checks built on these are in :mod:`shopapp.balancing.loose_mass`.

Model (planar Jeffcott rotor with a ball race, as in the automatic-balancer
literature: Thearle 1950, "Automatic dynamic balancers", Machine Design;
Chung & Ro 1999, "Dynamic analysis of an automatic dynamic balancer for
rotating mechanisms", J. Sound Vib. 228 — from memory). A rotor of mass ``M``
with unbalance ``U = M·ε`` turns at ``Ω(t)`` (angle θ) on an isotropic
support of stiffness ``k`` and viscous damping ``c``. ``n`` equal masses ``m``
roll in a race of radius ``R`` centred on the shaft; ball ``j`` sits at angle
``φ_j`` on the rotor, measured from the unbalance in the direction of
rotation. With the shaft centre ``z = x + iy`` (fixed frame), ``ψ_j = θ + φ_j``
and ``M_t = M + n·m``, Newton's/Lagrange's equations are::

    M_t z'' + c z' + k z = U (θ'² − iθ'') e^{iθ} + m R Σ (ψ_j'² − iψ_j'') e^{iψ_j}
    m R ψ_j'' = −m Im(z''·e^{−iψ_j}) − D R φ_j' − F_r sign(φ_j')

with ``D`` the viscous drag on each mass's speed relative to the race and
``F_r = c_rr·m·R·Ω²`` an optional rolling resistance (a fraction ``c_rr`` of the
mass's centrifugal force; our simple model). They are solved in the frame
turning with the rotor, where the balanced state is a fixed point.

Definitions:

* natural frequency ``ω_n = √(k / M_t)`` and support damping ratio
  ``ζ = c / (2·√(k·M_t))``, the loose masses included;
* drag ratio ``ζ_b = D / (2·m·ω_n)``;
* capacity ``n·m·R`` against the unbalance ``U``: a balanced state exists only
  when ``n·m·R >= U``; it is any arrangement with ``m·R·Σ e^{iφ_j} = −U``. For
  two masses ``φ = 180° ± arccos(U / (2·m·R))`` (about the light side); for
  more, :func:`balanced_ball_angles_deg` reports the arrangement nearest
  (least total angular movement) to the evenly spaced ring, one of a family.

Without the balancer (masses locked in an evenly spaced ring) the rotor is a
plain Jeffcott rotor of mass ``M_t`` and eccentricity ``U / M_t``
(:func:`shopapp.balancing.dynamics.jeffcott_response`).

In the frame turning with the rotor (``z = ŵ·e^{iθ}``), made non-dimensional
with time ``ω_n·t`` and lengths ``U/M_t``, the equations are :func:`rhs`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq, minimize

from shopapp.balancing.checks import non_negative, positive, whole
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.phasors import normalize_deg

MAX_BALLS = 64
_SLIP_BAND = 1e-4  # smoothing of the rolling resistance near zero relative speed (per ω_n)


@dataclass(frozen=True)
class LooseMassBalancer:
    """Validated input of the loose-mass model, SI units besides the named ones.

    ``capacity_gmm = n·m·R``; ``capacity_ratio = n·m·R / U``;
    ``eccentricity_um = U / M``; ``whirl_scale_um = U / M_t`` (the whirl far
    above resonance without the balancer).
    """

    rotor_mass_kg: float
    unbalance_gmm: float
    stiffness_n_per_m: float
    natural_frequency_hz: float
    damping_ratio: float
    ball_count: int
    ball_mass_g: float
    race_radius_mm: float
    drag_ratio: float
    rolling_resistance: float
    total_mass_kg: float
    capacity_gmm: float
    capacity_ratio: float
    eccentricity_um: float
    whirl_scale_um: float

    @property
    def omega_n_rad_s(self) -> float:
        """Natural frequency ω_n in rad/s."""
        return 2.0 * math.pi * self.natural_frequency_hz

    @property
    def _mu(self) -> float:
        return self.ball_mass_g * 1e-3 / self.total_mass_kg

    @property
    def _rho(self) -> float:
        return self.race_radius_mm * 1e-3 / (self.whirl_scale_um * 1e-6)


def loose_mass_balancer(
    rotor_mass_kg: float,
    unbalance_gmm: float | None = None,
    *,
    eccentricity_um: float | None = None,
    damping_ratio: float,
    ball_count: int,
    ball_mass_g: float,
    race_radius_mm: float,
    drag_ratio: float,
    natural_frequency_hz: float | None = None,
    stiffness_n_per_m: float | None = None,
    rolling_resistance: float = 0.0,
) -> LooseMassBalancer:
    """Check and collect the inputs of a loose-mass balancer.

    ``ω_n = √(k / (M + n·m))`` (loose masses included): give either the
    natural frequency (Hz) or the stiffness (N/m).

    Parameters
    ----------
    rotor_mass_kg : float
        Mass M of the rotor without the loose masses, > 0.
    unbalance_gmm : float
        Unbalance U = M·ε of the rotor, > 0; or
    eccentricity_um : float
        ε, the distance of the rotor's centre of mass from the shaft axis, > 0
        (U in g·mm = M in kg × ε in µm).
    damping_ratio : float
        Support damping ratio ζ = c / (2·√(k·M_t)), > 0.
    ball_count : int
        Number n of loose masses, 1 … 64.
    ball_mass_g : float
        Mass m of each, > 0.
    race_radius_mm : float
        Radius R of the race (path of the masses' centres), > 0.
    drag_ratio : float
        ζ_b = D / (2·m·ω_n), > 0 (a balancer without drag never settles).
    natural_frequency_hz, stiffness_n_per_m : float
        One of the two, > 0.
    rolling_resistance : float
        c_rr, resistance to rolling as a fraction of the centrifugal force, >= 0.
    """
    mass = positive("rotor_mass_kg", rotor_mass_kg)
    if (unbalance_gmm is None) == (eccentricity_um is None):
        raise BalancingInputError(
            "unbalance_gmm", "give the unbalance or the eccentricity (one of them)"
        )
    if unbalance_gmm is not None:
        u = positive("unbalance_gmm", unbalance_gmm)
    else:
        u = mass * positive("eccentricity_um", eccentricity_um)  # type: ignore[arg-type]
    zeta = positive("damping_ratio", damping_ratio)
    n = whole("ball_count", ball_count, 1)
    if n > MAX_BALLS:
        raise BalancingInputError(
            "ball_count", f"at most {MAX_BALLS}; lump fine beads into fewer equal masses"
        )
    m_g = positive("ball_mass_g", ball_mass_g)
    r_mm = positive("race_radius_mm", race_radius_mm)
    zeta_b = positive("drag_ratio", drag_ratio)
    c_rr = non_negative("rolling_resistance", rolling_resistance)
    if c_rr >= 1.0:
        raise BalancingInputError("rolling_resistance", "must be below 1")
    if zeta >= 1.0:
        raise BalancingInputError(
            "damping_ratio", "must be below 1 (an overdamped support has no resonance)"
        )
    total = mass + n * m_g * 1e-3
    if (natural_frequency_hz is None) == (stiffness_n_per_m is None):
        raise BalancingInputError(
            "natural_frequency_hz", "give the natural frequency or the stiffness (one of them)"
        )
    if natural_frequency_hz is not None:
        fn = positive("natural_frequency_hz", natural_frequency_hz)
        k = (2.0 * math.pi * fn) ** 2 * total
    else:
        k = positive("stiffness_n_per_m", stiffness_n_per_m)  # type: ignore[arg-type]
        fn = math.sqrt(k / total) / (2.0 * math.pi)
    eccentricity_m = u * 1e-6 / mass
    if eccentricity_m >= 0.5 * r_mm * 1e-3:
        raise BalancingInputError(
            "unbalance_gmm", "the eccentricity U/M must be far smaller than the race radius"
        )
    capacity = n * m_g * r_mm
    return LooseMassBalancer(
        rotor_mass_kg=mass,
        unbalance_gmm=u,
        stiffness_n_per_m=k,
        natural_frequency_hz=fn,
        damping_ratio=zeta,
        ball_count=n,
        ball_mass_g=m_g,
        race_radius_mm=r_mm,
        drag_ratio=zeta_b,
        rolling_resistance=c_rr,
        total_mass_kg=total,
        capacity_gmm=capacity,
        capacity_ratio=capacity / u,
        eccentricity_um=eccentricity_m * 1e6,
        whirl_scale_um=u * 1e-6 / total * 1e6,
    )


# --------------------------------------------------------------------------- balanced positions


def ring_deg(n: int) -> np.ndarray:
    """Evenly spaced ring, symmetric about the light side (180°)."""
    return 180.0 + 360.0 * (np.arange(n) - (n - 1) / 2.0) / n


def balanced_ball_angles_deg(balancer: LooseMassBalancer) -> tuple[float, ...] | None:
    """Ball angles of the balanced state, degrees from the unbalance with rotation.

    Balance: ``m·R·Σ e^{iφ_j} = −U`` (statics). Two masses: ``φ = 180° ±
    arccos(U / (2·m·R))`` (Thearle 1950 — from memory). One mass: 180° when
    ``m·R = U`` exactly. More masses: of the family of solutions, the one with
    the least total movement ``Σ (φ_j − φ⁰_j)²`` from the evenly spaced ring φ⁰
    symmetric about 180° (:func:`scipy.optimize.minimize`, SLSQP), started from
    the ring shrunk evenly towards 180°.

    Returns
    -------
    tuple of float or None
        None when the capacity ``n·m·R`` is below ``U`` (no balanced state).
    """
    n = balancer.ball_count
    k = balancer.unbalance_gmm / (balancer.ball_mass_g * balancer.race_radius_mm)
    if k > n * (1.0 + 1e-12):
        return None
    if n == 1:
        return (180.0,) if math.isclose(k, 1.0, rel_tol=1e-9) else None
    if n == 2:
        half = math.degrees(math.acos(min(k / 2.0, 1.0)))
        return (normalize_deg(180.0 - half), normalize_deg(180.0 + half))
    dev0 = np.radians(ring_deg(n) - 180.0)  # offsets from the light side

    def shortfall(t: float) -> float:
        return float(np.sum(np.cos((1.0 - t) * dev0)) - k)

    t0 = 1.0 if shortfall(1.0) <= 0.0 else (0.0 if shortfall(0.0) >= 0 else brentq(shortfall, 0, 1))
    start = (1.0 - t0) * dev0

    def constraint(d: np.ndarray) -> np.ndarray:
        return np.array([np.sum(np.cos(d)) - k, np.sum(np.sin(d))])

    sol = minimize(
        lambda d: 0.5 * float(np.sum((d - dev0) ** 2)),
        start,
        jac=lambda d: d - dev0,
        constraints=[{"type": "eq", "fun": constraint}],
        method="SLSQP",
        options={"ftol": 1e-14, "maxiter": 200},
    )
    dev = sol.x if sol.success and np.max(np.abs(constraint(sol.x))) < 1e-9 else start
    return tuple(normalize_deg(float(a)) for a in np.degrees(math.pi + dev))


# --------------------------------------------------------------------------- equations of motion


@dataclass(frozen=True)
class MotionParams:
    n: int
    mu: float  # m / M_t
    rho: float  # R / e0, e0 = U / M_t
    zeta: float
    zeta_b: float
    c_rr: float
    locked: bool


def motion_params(
    b: LooseMassBalancer, locked: bool = False, friction: bool = True
) -> MotionParams:
    return MotionParams(
        n=b.ball_count,
        mu=b._mu,
        rho=b._rho,
        zeta=b.damping_ratio,
        zeta_b=b.drag_ratio,
        c_rr=b.rolling_resistance if friction else 0.0,
        locked=locked,
    )


def rhs(y: np.ndarray, spd: float, acc: float, p: MotionParams) -> np.ndarray:
    """Right-hand side in the rotor frame, non-dimensional (time ω_n·t, lengths U/M_t).

    State ``[u, v, u', v', φ_1…φ_n, φ_1'…φ_n']`` with ŵ = u + iv the shaft centre
    in the rotor frame (one column per state when ``y`` is 2-D); ``spd`` = Ω/ω_n,
    ``acc`` its time derivative. With ``A = ŵ'' + 2iΩŵ' + iΩ'ŵ − Ω²ŵ`` (the shaft
    centre's acceleration turned into the rotor frame) the shaft equation reads
    ``(1 − nμ/2)·A + (μ/2)·Σe^{2iφ}·Ā = F`` once the masses' tangential equations
    ``φ'' = −Ω' − Im(A·e^{−iφ})/ρ − 2ζ_b·φ' − f`` are put in (μ = m/M_t, ρ = R·M_t/U,
    f the rolling resistance).
    """
    n = p.n
    w = y[0] + 1j * y[1]
    wd = y[2] + 1j * y[3]
    g = 2j * spd * wd + 1j * acc * w - spd * spd * w
    f = (spd * spd - 1j * acc) - 2.0 * p.zeta * (wd + 1j * spd * w) - w
    out = np.empty_like(y)
    out[0], out[1] = y[2], y[3]
    if p.locked:
        a = f
        out[4 : 4 + n] = 0.0
        out[4 + n :] = 0.0
    else:
        phi = y[4 : 4 + n]
        phid = y[4 + n :]
        e = np.exp(1j * phi)
        fric = p.c_rr * spd * spd * np.clip(phid / _SLIP_BAND, -1.0, 1.0)
        f = f + p.mu * p.rho * np.sum(
            ((spd + phid) ** 2 + 1j * (2.0 * p.zeta_b * phid + fric)) * e, axis=0
        )
        alpha = 1.0 - 0.5 * n * p.mu
        beta = 0.5 * p.mu * np.sum(e * e, axis=0)
        a = (alpha * f - beta * np.conj(f)) / (alpha * alpha - np.abs(beta) ** 2)
        out[4 : 4 + n] = phid
        out[4 + n :] = -acc - (a * np.conj(e)).imag / p.rho - 2.0 * p.zeta_b * phid - fric
    wdd = a - g
    out[2], out[3] = wdd.real, wdd.imag
    return out


def equilibrium_state(b: LooseMassBalancer, angles_deg: Sequence[float]) -> np.ndarray:
    n = b.ball_count
    y = np.zeros(4 + 2 * n)
    y[4 : 4 + n] = np.radians(angles_deg)
    return y


def jacobian(y0: np.ndarray, spd: float, p: MotionParams) -> np.ndarray:
    """Central-difference Jacobian, all columns in one vectorised call of :func:`rhs`."""
    steps = 1e-6 * np.maximum(1.0, np.abs(y0))
    shift = np.diag(steps)
    both = rhs(np.hstack([y0[:, None] + shift, y0[:, None] - shift]), spd, 0.0, p)
    size = y0.size
    return (both[:, :size] - both[:, size:]) / (2.0 * steps)
