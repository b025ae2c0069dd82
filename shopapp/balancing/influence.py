"""Influence-coefficient balancing: single plane, two or more planes, least squares.

Model (linear rotor-bearing system, one speed or several stacked):

    V = V0 + A · W

``V0`` is the vector of initial readings (one complex phasor per sensor and
speed), ``W`` the vector of masses added in the correction planes (grams at the
trial radius, complex: ``mass_g * exp(i * angle_deg)``), and ``A`` the matrix of
influence coefficients (reading units per gram), one column per plane. The
correction that cancels the readings is ``W = -A⁻¹ · V0`` for a square ``A``, and
the least-squares solution of ``A · W = -V0`` (``numpy.linalg.lstsq``) when there
are more readings than planes. Angles are degrees in the direction of rotation
(see :mod:`shopapp.balancing.phasors`); a correction by *removal* is made at the
returned angle + 180°.

Source of the method: the influence-coefficient method as set out in rotor
dynamics texts, e.g. Rao, *Mechanical Vibrations*, section on balancing of
rotating machines, and Wowk, *Machinery Vibration: Balancing* (both from
memory; the formulas are the standard ones above).
"""

from __future__ import annotations

import cmath
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from shopapp.balancing.checks import finite, finite_array, positive, whole
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.numtext import short
from shopapp.balancing.phasors import amplitude_angle, phasor

# Common practice, no source: a trial run should change the reading by at least
# ~30 % in amplitude or ~30° in phase, otherwise the coefficient is mostly noise.
TRIAL_MIN_AMPLITUDE_CHANGE = 0.30
TRIAL_MIN_PHASE_CHANGE_DEG = 30.0
# Judgement / common practice: above ~100 the correction reacts strongly to
# small reading errors; above 1e8 the matrix is numerically singular.
CONDITION_WARN = 100.0
CONDITION_REFUSE = 1e8
# Readings closer than this (relative) count as "identical" runs.
_SAME_RUN_RTOL = 1e-12
# Standard gravity, m/s² (CGPM 1901 conventional value).
STANDARD_GRAVITY_M_S2 = 9.80665

PROCEDURES = ("removed", "left_on")

TRIAL_MASS_CAUTIONS: tuple[str, ...] = (
    "Fix the trial mass securely (bolt, weld or a clip rated for the speed); "
    "a thrown mass is a projectile.",
    "Run only with the machine guard closed and everyone clear of the plane of rotation.",
    "Never exceed the permitted speed of the rotor or of the balancing machine.",
    "Start with the smaller trial mass if in doubt and check the vibration at low speed first.",
    "Local codes, the rotor maker's and the machine maker's limits and licensed practice "
    "take precedence over this advice.",
)


@dataclass(frozen=True)
class TrialRun:
    """One trial run: a trial mass in one plane and the readings it gave.

    Attributes
    ----------
    plane : int
        Correction plane of the trial mass, 1-based.
    mass_g : float
        Trial mass, grams, at the trial radius.
    angle_deg : float
        Angle of the trial mass, degrees in the direction of rotation.
    readings : tuple of complex
        Readings of this run, same sensors/speeds and order as the initial run.
    """

    plane: int
    mass_g: float
    angle_deg: float
    readings: tuple[complex, ...]


@dataclass(frozen=True)
class SinglePlaneResult:
    """Result of :func:`single_plane`.

    ``coefficient`` is reading units per gram; ``trial_amplitude_change`` is
    ``| |V1| - |V0| | / |V0|`` and ``trial_phase_change_deg`` the smaller angle
    between V0 and V1 (both ``inf``/0 when V0 is zero).
    """

    coefficient: complex
    correction_mass_g: float
    correction_angle_deg: float
    correction_vector_g: complex
    trial_amplitude_change: float
    trial_phase_change_deg: float
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class PlaneCorrection:
    """Correction mass for one plane (grams at the trial radius, angle in degrees)."""

    plane: int
    mass_g: float
    angle_deg: float
    vector_g: complex


@dataclass(frozen=True)
class InfluenceCoefficients:
    """Influence-coefficient matrix from trial runs (rows: readings, columns: planes)."""

    coefficients: tuple[tuple[complex, ...], ...]
    planes: tuple[int, ...]
    condition_number: float
    warnings: tuple[str, ...]

    def matrix(self) -> np.ndarray:
        """Return the coefficients as a complex ndarray of shape (n_readings, n_planes)."""
        return np.array(self.coefficients, dtype=complex)


@dataclass(frozen=True)
class InfluenceSolution:
    """Corrections computed from influence coefficients.

    ``predicted_residual`` is ``A · W + V0`` per reading (zero for a square,
    exactly solvable system; the least-squares remainder otherwise).
    """

    corrections: tuple[PlaneCorrection, ...]
    coefficients: tuple[tuple[complex, ...], ...]
    condition_number: float
    predicted_residual: tuple[complex, ...]
    predicted_residual_max: float
    warnings: tuple[str, ...]

    def matrix(self) -> np.ndarray:
        """Return the coefficients as a complex ndarray of shape (n_readings, n_planes)."""
        return np.array(self.coefficients, dtype=complex)


@dataclass(frozen=True)
class ResidualPrediction:
    """Predicted state after applying a (possibly rounded) correction.

    ``readings`` is ``A · W_applied + V0``; ``unbalance_g`` is the estimated
    unbalance left per plane, ``W_applied - W_exact`` (grams at the trial
    radius, complex), where ``W_exact`` is the least-squares correction.
    ``within_tolerance`` is None when no tolerance was given.
    """

    readings: tuple[complex, ...]
    max_amplitude: float
    unbalance_g: tuple[complex, ...]
    within_tolerance: bool | None
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class TrialMassAdvice:
    """Suggested trial mass per plane and the rule used (see :func:`trial_mass_advice`)."""

    mass_g: float
    radius_mm: float
    speed_rpm: float
    force_n: float
    static_load_n: float
    force_fraction: float
    rule: str
    cautions: tuple[str, ...]
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class TwoPlaneBatch:
    """Result of :func:`solve_two_plane_batch` (arrays over jobs).

    ``corrections`` has shape (n, 2) complex (zero where not solvable),
    ``solvable`` (n,) bool, ``condition_number`` (n,) float (``inf`` where singular).
    """

    corrections: np.ndarray
    solvable: np.ndarray
    condition_number: np.ndarray


# --------------------------------------------------------------------------- helpers


def _complex_vector(field: str, values: Sequence[complex] | np.ndarray) -> np.ndarray:
    arr = finite_array(field, values)
    if arr.ndim != 1 or arr.size == 0:
        raise BalancingInputError(field, "must be a non-empty list of readings")
    return arr.astype(complex)


def _trial_change(before: complex, after: complex) -> tuple[float, float]:
    """Return (relative amplitude change, phase change in degrees, 0..180)."""
    amp0 = abs(before)
    if amp0 == 0.0:
        return math.inf, 0.0
    ratio = abs(abs(after) - amp0) / amp0
    if abs(after) == 0.0:
        return ratio, 0.0
    dphi = abs(math.degrees(cmath.phase(after / before)))
    return ratio, dphi


def _small_effect(before: complex, after: complex) -> bool:
    ratio, dphi = _trial_change(before, after)
    return ratio < TRIAL_MIN_AMPLITUDE_CHANGE and dphi < TRIAL_MIN_PHASE_CHANGE_DEG


def _small_effect_warning(label: str) -> str:
    return (
        f"{label}: the trial run changed no reading by 30 % in amplitude or 30° in phase "
        "(common practice minimum); the coefficients may be dominated by measurement "
        "scatter — consider a larger trial mass."
    )


def _condition_number(matrix: np.ndarray, field: str) -> float:
    """2-norm condition number (ratio of extreme singular values), refusing singular."""
    s = np.linalg.svd(matrix, compute_uv=False)
    if s[0] == 0.0 or s[-1] <= s[0] / CONDITION_REFUSE:
        raise BalancingInputError(
            field,
            "the influence coefficients are singular or nearly so (condition number above "
            f"{CONDITION_REFUSE:.0e}); the planes cannot be told apart by these readings — "
            "use planes further apart, other sensor positions or a larger trial mass",
        )
    return float(s[0] / s[-1])


def _condition_warning(cond: float) -> tuple[str, ...]:
    if cond > CONDITION_WARN:
        return (
            f"Influence matrix is ill-conditioned (condition number {cond:.0f}, warning "
            f"above {CONDITION_WARN:.0f} by common practice): small reading errors give "
            "large correction errors.",
        )
    return ()


def _max_mass_warnings(masses_g: Sequence[float], max_mass_g: float | None) -> tuple[str, ...]:
    if max_mass_g is None:
        return ()
    limit = positive("max_mass_g", max_mass_g)
    out = []
    for i, m in enumerate(masses_g):
        if m > limit:
            out.append(
                f"Plane {i + 1}: correction {short(m, 3)} g is larger than the "
                f"{short(limit, 3)} g the rotor can take at this radius; check the readings "
                "or correct at a larger radius."
            )
    return tuple(out)


def _tolerance_check(
    readings: np.ndarray, tolerance_reading: float | None
) -> tuple[bool | None, tuple[str, ...]]:
    if tolerance_reading is None:
        return None, ()
    tol = positive("tolerance_reading", tolerance_reading)
    worst = float(np.max(np.abs(readings)))
    if worst > tol:
        return False, (
            f"Predicted residual reading {short(worst, 3)} is still above the tolerance "
            f"{short(tol, 3)}.",
        )
    return True, ()


# --------------------------------------------------------------------------- public API


def mass_at_radius(mass_g: float, from_radius_mm: float, to_radius_mm: float) -> float:
    """Mass giving the same unbalance at another radius.

    ``m2 = m1 · r1 / r2`` (unbalance ``U = m · r`` is what counts).

    Parameters
    ----------
    mass_g : float
        Mass at ``from_radius_mm``, grams, >= 0.
    from_radius_mm, to_radius_mm : float
        Radii, millimetres, > 0.
    """
    m = finite("mass_g", mass_g)
    if m < 0.0:
        raise BalancingInputError("mass_g", f"must not be negative, got {short(m)}")
    r1 = positive("from_radius_mm", from_radius_mm)
    r2 = positive("to_radius_mm", to_radius_mm)
    return m * r1 / r2


def single_plane(
    initial: complex,
    trial_mass_g: float,
    trial_angle_deg: float,
    trial_reading: complex,
    *,
    max_mass_g: float | None = None,
) -> SinglePlaneResult:
    """Single-plane balancing from one initial and one trial run.

    ``H = (V1 - V0) / T`` with ``T = trial_mass_g · exp(i·trial_angle)``, and the
    correction ``W = -V0 / H`` (grams at the trial radius). The trial mass is
    assumed removed before the correction is fitted.

    Parameters
    ----------
    initial : complex
        Initial reading V0 (``phasors.phasor(amplitude, angle_deg)``).
    trial_mass_g : float
        Trial mass, grams, > 0.
    trial_angle_deg : float
        Trial mass angle, degrees in the direction of rotation.
    trial_reading : complex
        Reading V1 with the trial mass attached.
    max_mass_g : float, optional
        Largest mass the plane can take; a larger correction gives a warning.

    Returns
    -------
    SinglePlaneResult

    Raises
    ------
    BalancingInputError
        Non-finite input, non-positive trial mass, or a trial reading equal to
        the initial one (field ``trial.reading``).
    """
    v0 = complex(_complex_vector("initial", [initial])[0])
    v1 = complex(_complex_vector("trial.reading", [trial_reading])[0])
    t = phasor(positive("trial.mass_g", trial_mass_g), trial_angle_deg, field="trial")
    delta = v1 - v0
    if abs(delta) <= _SAME_RUN_RTOL * max(abs(v0), abs(v1)):
        raise BalancingInputError(
            "trial.reading",
            "equals the initial reading: the trial mass had no measurable effect "
            "(was it attached, or was the same run logged twice?)",
        )
    h = delta / t
    w = -v0 / h
    mass, angle = amplitude_angle(w)
    ratio, dphi = _trial_change(v0, v1)
    warnings: list[str] = []
    if _small_effect(v0, v1):
        warnings.append(_small_effect_warning("Trial run"))
    warnings.extend(_max_mass_warnings([mass], max_mass_g))
    return SinglePlaneResult(
        coefficient=h,
        correction_mass_g=mass,
        correction_angle_deg=angle,
        correction_vector_g=w,
        trial_amplitude_change=ratio,
        trial_phase_change_deg=dphi,
        warnings=tuple(warnings),
    )


def influence_coefficients(
    initial: Sequence[complex] | np.ndarray,
    trials: Sequence[TrialRun],
    *,
    procedure: str = "removed",
) -> InfluenceCoefficients:
    """Influence-coefficient matrix from an initial run and one trial run per plane.

    ``procedure="removed"``: each trial mass is removed before the next run, so
    column ``j`` is ``A[:, j] = (V_j - V0) / T_j``.
    ``procedure="left_on"``: each trial mass stays on during the later runs
    (run ``j`` carries trials 1..j), so ``A[:, j] = (V_j - V_{j-1}) / T_j``.

    Parameters
    ----------
    initial : sequence of complex
        Initial readings V0, one per sensor (and speed), length n_readings.
    trials : sequence of TrialRun
        One run per plane, in the order they were run; planes 1..n_planes each
        exactly once; each run has n_readings readings.
    procedure : {"removed", "left_on"}

    Returns
    -------
    InfluenceCoefficients
        Columns ordered by plane number (plane 1 first).

    Raises
    ------
    BalancingInputError
        Fewer readings than planes (``initial``), bad plane numbers
        (``trials[k].plane``), a trial run identical to the run before it
        (``trials[k].readings``), a singular matrix (``trials``).
    """
    if procedure not in PROCEDURES:
        raise BalancingInputError("procedure", f"must be one of {', '.join(PROCEDURES)}")
    v0 = _complex_vector("initial", initial)
    n_planes = len(trials)
    if n_planes == 0:
        raise BalancingInputError("trials", "at least one trial run is needed")
    if v0.size < n_planes:
        raise BalancingInputError(
            "initial",
            f"{n_planes} planes need at least one reading per plane; readings given: "
            f"{v0.size}",
        )
    seen: set[int] = set()
    columns: dict[int, np.ndarray] = {}
    warnings: list[str] = []
    reference = v0
    for k, run in enumerate(trials):
        plane = whole(f"trials[{k}].plane", run.plane, 1)
        if plane > n_planes or plane in seen:
            raise BalancingInputError(
                f"trials[{k}].plane",
                f"planes must be numbered 1..{n_planes}, each with exactly one trial run",
            )
        seen.add(plane)
        t = phasor(positive(f"trials[{k}].mass_g", run.mass_g), run.angle_deg, field=f"trials[{k}]")
        v = _complex_vector(f"trials[{k}].readings", run.readings)
        if v.size != v0.size:
            raise BalancingInputError(
                f"trials[{k}].readings",
                f"has {v.size} readings; the initial run has {v0.size}",
            )
        delta = v - reference
        scale = max(float(np.max(np.abs(v))), float(np.max(np.abs(reference))))
        if float(np.max(np.abs(delta))) <= _SAME_RUN_RTOL * scale:
            before = "initial run" if procedure == "removed" or k == 0 else "previous run"
            raise BalancingInputError(
                f"trials[{k}].readings",
                f"equal the {before}'s: the trial mass had no measurable effect "
                "(was it attached, or was the same run logged twice?)",
            )
        if all(_small_effect(a, b) for a, b in zip(reference, v, strict=True)):
            warnings.append(_small_effect_warning(f"Trial run {k + 1} (plane {plane})"))
        columns[plane] = delta / t
        if procedure == "left_on":
            reference = v
    matrix = np.column_stack([columns[p] for p in range(1, n_planes + 1)])
    cond = _condition_number(matrix, "trials")
    warnings.extend(_condition_warning(cond))
    return InfluenceCoefficients(
        coefficients=tuple(tuple(complex(x) for x in row) for row in matrix),
        planes=tuple(range(1, n_planes + 1)),
        condition_number=cond,
        warnings=tuple(warnings),
    )


def correction_from_coefficients(
    coefficients: Sequence[Sequence[complex]] | np.ndarray,
    initial: Sequence[complex] | np.ndarray,
    *,
    max_mass_g: float | None = None,
    tolerance_reading: float | None = None,
) -> InfluenceSolution:
    """Corrections from a known coefficient matrix and one initial run.

    Solves ``A · W = -V0`` in the least-squares sense (``numpy.linalg.lstsq``;
    exact for a square, non-singular ``A``). Used both right after the trial
    runs and for a repeat job with coefficients stored for the rotor type.

    Parameters
    ----------
    coefficients : array_like, shape (n_readings, n_planes), complex
        Influence coefficients, reading units per gram.
    initial : sequence of complex, length n_readings
        Initial readings V0.
    max_mass_g : float, optional
        Largest mass a plane can take (warning when exceeded).
    tolerance_reading : float, optional
        Permitted reading amplitude; warn when the predicted residual exceeds it.

    Returns
    -------
    InfluenceSolution
        ``predicted_residual = A · W + V0``.

    Raises
    ------
    BalancingInputError
        Non-finite values, wrong shapes, fewer readings than planes
        (``initial``), singular matrix (``coefficients``).
    """
    a = finite_array("coefficients", coefficients).astype(complex)
    if a.ndim < 2:
        a = a.reshape(-1, 1)  # a scalar or a 1-D array is one plane
    if a.ndim != 2 or a.size == 0:
        raise BalancingInputError("coefficients", "must be a matrix (readings × planes)")
    v0 = _complex_vector("initial", initial)
    n_readings, n_planes = a.shape
    if v0.size != n_readings:
        raise BalancingInputError(
            "initial",
            f"has {v0.size} readings; the coefficients are for {n_readings}",
        )
    if n_readings < n_planes:
        raise BalancingInputError(
            "initial",
            f"{n_planes} planes need at least one reading per plane; readings given: "
            f"{n_readings}",
        )
    cond = _condition_number(a, "coefficients")
    w = np.linalg.lstsq(a, -v0, rcond=None)[0]
    resid = a @ w + v0
    warnings = list(_condition_warning(cond))
    corrections = []
    for i, wi in enumerate(w):
        mass, angle = amplitude_angle(complex(wi))
        corrections.append(PlaneCorrection(plane=i + 1, mass_g=mass, angle_deg=angle,
                                           vector_g=complex(wi)))
    warnings.extend(_max_mass_warnings([c.mass_g for c in corrections], max_mass_g))
    warnings.extend(_tolerance_check(resid, tolerance_reading)[1])
    return InfluenceSolution(
        corrections=tuple(corrections),
        coefficients=tuple(tuple(complex(x) for x in row) for row in a),
        condition_number=cond,
        predicted_residual=tuple(complex(x) for x in resid),
        predicted_residual_max=float(np.max(np.abs(resid))),
        warnings=tuple(warnings),
    )


def multi_plane(
    initial: Sequence[complex] | np.ndarray,
    trials: Sequence[TrialRun],
    *,
    procedure: str = "removed",
    max_mass_g: float | None = None,
    tolerance_reading: float | None = None,
) -> InfluenceSolution:
    """Corrections for any number of planes from an initial run and one trial run per plane.

    :func:`influence_coefficients` followed by :func:`correction_from_coefficients`;
    with more readings (sensors × speeds) than planes the least-squares
    correction is returned and ``predicted_residual`` shows what remains.
    Warnings of both steps are merged.
    """
    coeffs = influence_coefficients(initial, trials, procedure=procedure)
    sol = correction_from_coefficients(
        coeffs.coefficients, initial, max_mass_g=max_mass_g, tolerance_reading=tolerance_reading
    )
    # The condition warning is issued by both steps; keep one.
    merged = list(coeffs.warnings) + [w for w in sol.warnings if w not in coeffs.warnings]
    return InfluenceSolution(
        corrections=sol.corrections,
        coefficients=sol.coefficients,
        condition_number=sol.condition_number,
        predicted_residual=sol.predicted_residual,
        predicted_residual_max=sol.predicted_residual_max,
        warnings=tuple(merged),
    )


def two_plane(
    initial: Sequence[complex] | np.ndarray,
    trials: Sequence[TrialRun],
    *,
    procedure: str = "removed",
    max_mass_g: float | None = None,
    tolerance_reading: float | None = None,
) -> InfluenceSolution:
    """Two-plane balancing: ``W = -A⁻¹ · V0`` from two trial runs (one per plane).

    Same as :func:`multi_plane` but requires exactly two trial runs; two
    readings give the exact 2×2 solve, more readings (e.g. two sensors at two
    speeds) the least-squares one.
    """
    if len(trials) != 2:
        raise BalancingInputError(
            "trials", f"two-plane balancing needs exactly 2 trial runs, got {len(trials)}"
        )
    return multi_plane(
        initial, trials, procedure=procedure, max_mass_g=max_mass_g,
        tolerance_reading=tolerance_reading,
    )


def predict_residual(
    coefficients: Sequence[Sequence[complex]] | np.ndarray,
    initial: Sequence[complex] | np.ndarray,
    applied_g: Sequence[complex] | np.ndarray,
    *,
    tolerance_reading: float | None = None,
) -> ResidualPrediction:
    """Predicted readings after fitting a (rounded, split, available) correction.

    ``V = A · W_applied + V0``; the unbalance left per plane is estimated as
    ``W_applied - W_exact`` with ``W_exact`` the least-squares correction.

    Parameters
    ----------
    coefficients : array_like, shape (n_readings, n_planes)
        Influence coefficients, reading units per gram (a scalar or 1-D array
        is taken as a single plane).
    initial : sequence of complex, length n_readings
    applied_g : sequence of complex, length n_planes
        Masses actually fitted, grams at the trial radius, as complex vectors
        (``phasors.phasor(mass_g, angle_deg)``); a removal at θ is an addition at θ + 180°.
    tolerance_reading : float, optional
        Permitted reading amplitude.
    """
    sol = correction_from_coefficients(coefficients, initial)
    a = sol.matrix()
    w = _complex_vector("applied_g", applied_g)
    if w.size != a.shape[1]:
        raise BalancingInputError(
            "applied_g",
            f"needs one mass per plane of the coefficients ({a.shape[1]}); given: {w.size}"
        )
    v0 = _complex_vector("initial", initial)
    readings = a @ w + v0
    exact = np.array([c.vector_g for c in sol.corrections])
    within, warnings = _tolerance_check(readings, tolerance_reading)
    return ResidualPrediction(
        readings=tuple(complex(x) for x in readings),
        max_amplitude=float(np.max(np.abs(readings))),
        unbalance_g=tuple(complex(x) for x in (w - exact)),
        within_tolerance=within,
        warnings=warnings,
    )


def trial_mass_advice(
    rotor_mass_kg: float,
    speed_rpm: float,
    radius_mm: float,
    *,
    planes: int = 1,
    force_fraction: float = 0.10,
) -> TrialMassAdvice:
    """Trial mass whose centrifugal force is a fraction of the static bearing load.

    Rule (common practice, no source): choose the trial mass so that its
    centrifugal force ``F = m_t · r · Ω²`` is about 10 % (5–10 %) of the static
    load it acts against — the rotor weight for single-plane work, or the
    weight share of one bearing, ``rotor_mass / planes``, for multi-plane work
    (centre of mass roughly between the bearings). Hence

        m_t [g] = 1e6 · f · (M / planes) [kg] · g₀ / (r [mm] · Ω² [rad²/s²]),
        Ω = 2π · n / 60.

    Parameters
    ----------
    rotor_mass_kg : float
        Rotor mass, kg, > 0.
    speed_rpm : float
        Speed of the trial run, rpm, > 0.
    radius_mm : float
        Radius at which the trial mass is fixed, mm, > 0.
    planes : int
        Number of correction planes (>= 1).
    force_fraction : float
        Centrifugal force as a fraction of the static load; 0 < f <= 0.5.

    Returns
    -------
    TrialMassAdvice
        Includes the safety cautions that go with every trial-mass advice.
    """
    mass = positive("rotor_mass_kg", rotor_mass_kg)
    speed = positive("speed_rpm", speed_rpm)
    radius = positive("radius_mm", radius_mm)
    n_planes = whole("planes", planes, 1)
    frac = positive("force_fraction", force_fraction)
    if frac > 0.5:
        raise BalancingInputError(
            "force_fraction", f"must be at most 0.5 of the static load, got {short(frac)}"
        )
    omega = 2.0 * math.pi * speed / 60.0
    load_n = mass / n_planes * STANDARD_GRAVITY_M_S2
    force_n = frac * load_n
    mass_g = force_n / (radius / 1000.0 * omega**2) * 1000.0
    warnings: list[str] = []
    if not 0.05 <= frac <= 0.10:
        warnings.append(
            f"Force fraction {short(frac)} is outside the usual 0.05–0.10 (common practice)."
        )
    return TrialMassAdvice(
        mass_g=mass_g,
        radius_mm=radius,
        speed_rpm=speed,
        force_n=force_n,
        static_load_n=load_n,
        force_fraction=frac,
        rule=(
            "trial mass whose centrifugal force is about 5–10 % of the static load per plane "
            "(common practice, no source)"
        ),
        cautions=TRIAL_MASS_CAUTIONS,
        warnings=tuple(warnings),
    )


def trial_force(
    rotor_mass_kg: float,
    speed_rpm: float,
    mass_g: float,
    radius_mm: float,
    *,
    planes: int = 1,
) -> tuple[float, float]:
    """A fitted trial mass's centrifugal force and the static load per plane it acts
    against, newtons: ``F = m_t · r · Ω²`` with ``Ω = 2π · n / 60``, and
    ``(M / planes) · g₀`` — the quantities :func:`trial_mass_advice` sizes a trial mass
    by (about 5–10 % of the load, common practice, no source).

    Returns
    -------
    (force_n, static_load_n)
    """
    mass = positive("rotor_mass_kg", rotor_mass_kg)
    speed = positive("speed_rpm", speed_rpm)
    trial = positive("mass_g", mass_g)
    radius = positive("radius_mm", radius_mm)
    n_planes = whole("planes", planes, 1)
    omega = 2.0 * math.pi * speed / 60.0
    return (trial / 1000.0 * radius / 1000.0 * omega**2,
            mass / n_planes * STANDARD_GRAVITY_M_S2)


def solve_two_plane_batch(
    coefficients: np.ndarray,
    initial: np.ndarray,
    *,
    on_singular: str = "raise",
) -> TwoPlaneBatch:
    """Vectorised two-plane corrections ``W = -A⁻¹ · V0`` for many jobs at once.

    Closed-form 2×2 inverse: with ``A = [[a, b], [c, d]]`` and
    ``det = a·d - b·c``, ``W1 = -(d·v1 - b·v2)/det``, ``W2 = -(a·v2 - c·v1)/det``.
    The 2-norm condition number comes from the singular values of a 2×2
    matrix: with ``F = ‖A‖_F²`` and ``D = |det|``, ``s1·s2 = D`` and
    ``s1² + s2² = F``, so ``cond = (F + √(F² - 4D²)) / (2D)``.
    A row is singular when ``D == 0`` or ``cond > 1e8`` (as :func:`multi_plane`).

    Parameters
    ----------
    coefficients : ndarray, shape (n, 2, 2), complex
        Influence matrices, reading units per gram.
    initial : ndarray, shape (n, 2), complex
        Initial readings.
    on_singular : {"raise", "mask"}
        ``"raise"``: a singular row raises BalancingInputError with field
        ``coefficients[i]``; ``"mask"``: its correction is 0 and ``solvable`` False.

    Returns
    -------
    TwoPlaneBatch
    """
    if on_singular not in ("raise", "mask"):
        raise BalancingInputError("on_singular", "must be 'raise' or 'mask'")
    a = np.asarray(coefficients)
    v = np.asarray(initial)
    if a.dtype.kind not in "biufc" or a.ndim != 3 or a.shape[1:] != (2, 2):
        raise BalancingInputError("coefficients", "must be a numeric array of shape (n, 2, 2)")
    if v.dtype.kind not in "biufc" or v.shape != (a.shape[0], 2):
        raise BalancingInputError("initial", f"must be a numeric array of shape ({a.shape[0]}, 2)")
    if not np.isfinite(a).all():
        raise BalancingInputError("coefficients", "contains NaN or infinite values")
    if not np.isfinite(v).all():
        raise BalancingInputError("initial", "contains NaN or infinite values")
    a11, a12, a21, a22 = a[:, 0, 0], a[:, 0, 1], a[:, 1, 0], a[:, 1, 1]
    v1, v2 = v[:, 0], v[:, 1]
    det = a11 * a22 - a12 * a21
    abs_det = np.abs(det)
    frob = (a.real**2 + a.imag**2).sum(axis=(1, 2))
    disc = np.sqrt(np.maximum(frob * frob - 4.0 * abs_det * abs_det, 0.0))
    cond = np.full(a.shape[0], np.inf)
    np.divide(frob + disc, 2.0 * abs_det, out=cond, where=abs_det > 0.0)
    ok = cond <= CONDITION_REFUSE
    if on_singular == "raise" and not ok.all():
        i = int(np.argmin(ok))
        raise BalancingInputError(
            f"coefficients[{i}]",
            "the influence matrix is singular or nearly so (condition number above "
            f"{CONDITION_REFUSE:.0e})",
        )
    inv_det = np.zeros(a.shape[0], dtype=complex)
    np.divide(-1.0, det, out=inv_det, where=ok)
    w = np.empty((a.shape[0], 2), dtype=complex)
    w[:, 0] = (a22 * v1 - a12 * v2) * inv_det
    w[:, 1] = (a11 * v2 - a21 * v1) * inv_det
    return TwoPlaneBatch(corrections=w, solvable=ok, condition_number=cond)
