"""Bridge from a job's stored rows to :mod:`shopapp.balancing`.

Everything here is computed on the fly from rows already loaded (job, rotor
type, machine, runs with readings, corrections, stored influence sets); nothing
is written. :func:`evaluate` never raises on bad stored data: what cannot be
computed is said in a note, so the job page always renders.

Conventions
-----------
- Angles are internal (degrees in the direction of rotation from the
  reference mark); the web converts them for display.
- Unbalance is g·mm in the correction planes; the web converts to the shop's unit.
- Influence coefficients are reading units per gram *at each plane's
  correction radius* (``V = V0 + A·W``, :mod:`shopapp.balancing.influence`).
  A trial mass fixed at another radius is first turned into the equivalent
  mass at the correction radius, ``m·r_trial/R`` (unbalance ``m·r`` is what counts).
- Readings in g·mm (a calibrated machine) are the unbalance itself and are
  judged directly; readings in µm, mm/s, mil or in/s are turned into unbalance
  with the influence coefficients, ``U = A⁻¹·V`` (grams at R, times R in g·mm).
- Stored coefficients are used for a job without trial runs of its own when a
  set exists for the same rotor type, machine, number of planes and reading
  unit at a speed within ±5 % of the run's speed (our rule: the nearest speed
  wins, then the most recently learned).
- The choice is stable over time (our rule): a job that recorded the set its
  corrections came from (``Job.influence_set_id``) is always judged with that
  set; otherwise only sets learned *before* the job's initial run count, so a
  set learned later never re-judges an older job.
"""

from __future__ import annotations

import cmath
import datetime as dt
import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from shopapp.balancing import arbor, dynamics, influence, removal, tolerance
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.phasors import amplitude_angle, phasor
from shopapp.charts import Figure
from shopapp.charts.polar import PolarVector, polar_figure
from shopapp.core.display import plain, quantity
from shopapp.jobs import limits
from shopapp.jobs.advice import (
    DEFAULT_DRILL_DIAMETER_MM,
    CorrectionAdvice,
    plane_advice,
    weights_on_rotor,
)
from shopapp.models import Correction, InfluenceSet, Job, Machine, RotorType, Run

SPEED_MATCH_FRACTION = 0.05  # stored coefficients within ±5 % of the run's speed
CALIBRATED_UNIT = "g·mm"
JUDGED_PURPOSES = ("initial", "check", "final")
CHECK_PURPOSES = ("check", "final")
TOLERANCE_LABELS = {"grade": "ISO 21940-11", "4w/n": "4W/N (API-style)", "explicit": "customer"}
# The job page says these once, in its one safety block (PAGE_CAUTION); they are not
# repeated beside each piece of advice. What is left is specific to a trial mass.
PAGE_CAUTION = (
    "Never run above the rotor's permitted speed or the balancing machine maker's limits: "
    "over-speed can burst the rotor or throw its masses. Run only with the guard closed and "
    "everyone clear of the plane of rotation; secure every trial and correction mass. Local "
    "codes, the rotor and machine makers' instructions and licensed practice take precedence "
    "over this advice."
)
COVERED_BY_PAGE_CAUTION = frozenset({
    dynamics.SPEED_CAUTION,
    influence.TRIAL_MASS_CAUTIONS[1],  # guard closed, clear of the plane of rotation
    influence.TRIAL_MASS_CAUTIONS[2],  # never exceed the permitted speed
    influence.TRIAL_MASS_CAUTIONS[4],  # local codes and makers' limits first
})


# --------------------------------------------------------------------------- data


@dataclass(frozen=True)
class JobTolerance:
    """The job's tolerance, per correction plane and (ISO) per bearing plane.

    ``plane_limits_gmm`` are the limits in the correction planes (used for the
    polar plot and when the tolerance is given per correction plane);
    ``bearing_limits_gmm`` the ISO allocation to bearings A and B; ``reference``
    says which set decides the verdict.
    """

    method: str
    label: str
    planes: int
    plane_limits_gmm: tuple[float, ...]
    bearing_limits_gmm: tuple[float, float] | None
    reference: str
    u_per_gmm: float
    e_per_um: float | None
    core: tolerance.Tolerance | None
    geometry: tolerance.RotorGeometry | None
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class RunData:
    """A run's readings as phasors, plane 1 first."""

    run_id: int
    seq: int
    purpose: str
    speed_rpm: float
    unit: str
    readings: tuple[complex, ...]
    trial_plane: int | None = None
    trial_mass_g: float | None = None
    trial_angle_deg: float | None = None
    trial_radius_mm: float | None = None
    earlier_trial_left_on: bool = False


@dataclass(frozen=True)
class StoredSetInfo:
    """What the page says about a stored influence set."""

    id: int
    speed_rpm: float
    learned_at: dt.datetime
    source_job_id: int | None
    last_prediction_error_pct: float | None
    last_used_at: dt.datetime | None
    condition_number: float | None

    def age_days(self, now: dt.datetime) -> int:
        return max(0, (now - self.learned_at).days)


@dataclass(frozen=True)
class Coefficients:
    """Influence coefficients in use for the job (reading units per gram at R)."""

    source: str  # "trials" | "stored" | "calibrated"
    matrix: np.ndarray
    unit: str
    speed_rpm: float | None
    condition_number: float
    procedure: str = "removed"
    reference_run_id: int | None = None
    trial_run_ids: tuple[int, ...] = ()
    stored: StoredSetInfo | None = None
    warnings: tuple[str, ...] = ()

    def as_json(self) -> list[list[float]]:
        """Row-major ``[re, im]`` pairs, the form :class:`InfluenceSet` stores."""
        return [[float(z.real), float(z.imag)] for z in self.matrix.ravel()]


@dataclass(frozen=True)
class VerdictRow:
    label: str
    residual_gmm: float
    angle_deg: float
    limit_gmm: float
    pct: float
    passed: bool


@dataclass(frozen=True)
class RunVerdict:
    """Residual of one run against the tolerance.

    ``rows`` decide (bearing planes for ISO two-plane, correction planes
    otherwise), ``other_rows`` are shown for information. ``judged`` is False
    when the readings could not be turned into unbalance (``message`` says why).
    """

    run_id: int
    seq: int
    purpose: str
    judged: bool
    passed: bool | None
    rows: tuple[VerdictRow, ...] = ()
    other_rows: tuple[VerdictRow, ...] = ()
    reference: str = "correction_planes"
    residual_gmm: tuple[complex, ...] = ()
    message: str = ""


@dataclass
class JobCalc:
    """Everything the job page (and the state machine) needs from the core."""

    planes: int
    tolerance: JobTolerance | None = None
    tolerance_error: str = ""
    coefficients: Coefficients | None = None
    coefficients_note: str = ""
    advice: CorrectionAdvice | None = None
    advice_note: str = ""
    verdicts: dict[int, RunVerdict] = field(default_factory=dict)
    last_check: RunVerdict | None = None
    warnings: list[str] = field(default_factory=list)
    # Cautions beyond the page's safety block (PAGE_CAUTION), and those of a trial mass.
    cautions: list[str] = field(default_factory=list)
    trial_advice: list[influence.TrialMassAdvice] = field(default_factory=list)
    trial_cautions: list[str] = field(default_factory=list)

    @property
    def in_tolerance(self) -> bool:
        """True when the last check/final run was judged and passed in every plane."""
        return self.last_check is not None and bool(self.last_check.passed)


# --------------------------------------------------------------------------- tolerance


def rotor_geometry(rt: RotorType) -> tolerance.RotorGeometry:
    """The rotor type's axial geometry for the core (planes only when two-plane)."""
    if rt.planes == 2:
        return tolerance.rotor_geometry(
            rt.bearing_a_mm, rt.bearing_b_mm, rt.centre_of_mass_mm, rt.plane_1_mm, rt.plane_2_mm
        )
    return tolerance.rotor_geometry(rt.bearing_a_mm, rt.bearing_b_mm, rt.centre_of_mass_mm)


def plane_radii_mm(rt: RotorType) -> tuple[float, ...]:
    if rt.planes == 2:
        return (rt.radius_1_mm, rt.radius_2_mm or rt.radius_1_mm)
    return (rt.radius_1_mm,)


def job_tolerance(job: Job, rt: RotorType) -> JobTolerance:
    """Tolerance per plane for the job.

    - ``grade``: ISO 21940-11 ``U_per = 1000·G·m/Ω`` from the rotor mass and the
      job's service speed (:func:`shopapp.balancing.tolerance.iso_tolerance`);
      two-plane rotors get the allocation to the bearing planes by the centre
      of mass and its equivalent correction-plane limits; a single-plane rotor
      takes the whole ``U_per`` in its one plane.
    - ``4w/n``: ``6350·W/N`` g·mm per plane with W the journal load next to the
      plane (A for plane 1, B for plane 2); a single-plane rotor takes the sum
      of both journal loads (the rotor weight).
    - ``explicit``: the customer's g·mm per correction plane.

    Raises
    ------
    BalancingInputError
        Bad stored values (named field).
    """
    planes = rt.planes
    method = job.tolerance_method
    if method == "grade":
        if job.tolerance_grade is None:
            raise BalancingInputError("tolerance_grade", "is needed for a grade tolerance")
        label = f"G {plain(job.tolerance_grade)} ({TOLERANCE_LABELS['grade']})"
        if planes == 1:
            u = tolerance.permissible_unbalance(
                job.tolerance_grade, rt.mass_kg, job.service_speed_rpm
            )
            e = tolerance.permissible_specific_unbalance(
                job.tolerance_grade, job.service_speed_rpm
            )
            return JobTolerance(method, label, 1, (u,), None, "correction_planes", u, e, None,
                                None, ("single-plane rotor: the whole U_per in the one plane",))
        geo = rotor_geometry(rt)
        core = tolerance.iso_tolerance(job.tolerance_grade, rt.mass_kg, job.service_speed_rpm, geo)
        assert core.plane_1_gmm is not None and core.plane_2_gmm is not None
        assert core.bearing_a_gmm is not None and core.bearing_b_gmm is not None
        return JobTolerance(
            method, label, 2, (core.plane_1_gmm, core.plane_2_gmm),
            (core.bearing_a_gmm, core.bearing_b_gmm), core.reference, core.u_per_gmm,
            core.e_per_um, core, geo, core.notes,
        )
    if method == "4w/n":
        if job.journal_load_a_kg is None:
            raise BalancingInputError("journal_load_a_kg", "is needed for a 4W/N tolerance")
        label = TOLERANCE_LABELS["4w/n"]
        if planes == 1:
            load = job.journal_load_a_kg + (job.journal_load_b_kg or 0.0)
            u = tolerance.api_limit_gmm(load, job.service_speed_rpm)
            return JobTolerance(method, label, 1, (u,), None, "correction_planes", u,
                                u / rt.mass_kg, None, None,
                                ("single plane: W is the sum of both journal loads",))
        core = tolerance.api_tolerance(
            job.journal_load_a_kg, job.service_speed_rpm, job.journal_load_b_kg, rt.mass_kg
        )
        assert core.plane_1_gmm is not None and core.plane_2_gmm is not None
        return JobTolerance(method, label, 2, (core.plane_1_gmm, core.plane_2_gmm), None,
                            core.reference, core.u_per_gmm, core.e_per_um, core,
                            rotor_geometry(rt), core.notes)
    if method == "explicit":
        if job.explicit_limit_1_gmm is None:
            raise BalancingInputError("explicit_limit_1_gmm", "is needed for a customer limit")
        label = TOLERANCE_LABELS["explicit"]
        if planes == 1:
            limit = tolerance.customer_tolerance(job.explicit_limit_1_gmm).plane_1_gmm
            assert limit is not None
            return JobTolerance(method, label, 1, (limit,), None, "correction_planes", limit,
                                limit / rt.mass_kg, None, None, ("customer limit",))
        core = tolerance.customer_tolerance(job.explicit_limit_1_gmm, job.explicit_limit_2_gmm)
        assert core.plane_1_gmm is not None and core.plane_2_gmm is not None
        return JobTolerance(method, label, 2, (core.plane_1_gmm, core.plane_2_gmm), None,
                            core.reference, core.u_per_gmm, None, core, rotor_geometry(rt),
                            core.notes)
    raise BalancingInputError("tolerance_method", f"unknown method {method!r}")


# --------------------------------------------------------------------------- runs


def run_data(run: Run) -> RunData:
    """Phasors of a stored run (readings ordered by plane)."""
    readings = sorted(run.readings, key=lambda r: r.plane)
    unit = readings[0].unit if readings else CALIBRATED_UNIT
    return RunData(
        run_id=run.id,
        seq=run.seq,
        purpose=run.purpose,
        speed_rpm=run.speed_rpm,
        unit=unit,
        readings=tuple(phasor(r.amplitude, r.angle_deg) for r in readings),
        trial_plane=run.trial_plane,
        trial_mass_g=run.trial_mass_g,
        trial_angle_deg=run.trial_angle_deg,
        trial_radius_mm=run.trial_radius_mm,
        earlier_trial_left_on=run.earlier_trial_left_on,
    )


def _same_speed(a: float, b: float) -> bool:
    return abs(a - b) <= SPEED_MATCH_FRACTION * max(a, b)


def stored_set_info(s: InfluenceSet) -> StoredSetInfo:
    return StoredSetInfo(s.id, s.speed_rpm, s.learned_at, s.source_job_id,
                         s.last_prediction_error_pct, s.last_used_at, s.condition_number)


def stored_matrix(s: InfluenceSet) -> np.ndarray:
    """The stored row-major ``[re, im]`` pairs as an ``planes × planes`` complex matrix."""
    values = [complex(float(re), float(im)) for re, im in s.coefficients]
    n = s.planes
    if len(values) != n * n:
        raise BalancingInputError("coefficients", f"stored set {s.id} has {len(values)} values")
    return np.array(values, dtype=complex).reshape(n, n)


def nearest_influence_set(
    sets: Sequence[InfluenceSet], *, speed_rpm: float, planes: int, unit: str,
    learned_before: dt.datetime | None = None,
) -> InfluenceSet | None:
    """The stored set to use: same planes and unit, speed within ±5 %, nearest speed, newest.

    ``learned_before``: only sets learned strictly before this moment (the job's
    initial run) count.
    """
    fits = [s for s in sets if s.planes == planes and s.reading_unit == unit
            and _same_speed(s.speed_rpm, speed_rpm)
            and (learned_before is None or s.learned_at < learned_before)]
    if not fits:
        return None
    return min(fits, key=lambda s: (abs(s.speed_rpm - speed_rpm), -s.learned_at.timestamp(),
                                    -s.id))


def initial_run_at(runs: Sequence[Run]) -> dt.datetime | None:
    """When the job's first initial run was taken (its first run when none is marked initial)."""
    ordered = sorted(runs, key=lambda r: r.seq)
    first = next((r for r in ordered if r.purpose == "initial"), ordered[0] if ordered else None)
    return first.taken_at if first is not None else None


def job_influence_set(
    job: Job, sets: Sequence[InfluenceSet], runs: Sequence[Run], *, speed_rpm: float,
    planes: int, unit: str,
) -> InfluenceSet | None:
    """The stored set a job is judged with (module docstring: stable over time).

    The set recorded on the job when it is among ``sets``; else the nearest set
    learned before the job's initial run.
    """
    if job.influence_set_id is not None:
        recorded = next((s for s in sets if s.id == job.influence_set_id), None)
        if recorded is not None:
            return recorded
    before = initial_run_at(runs)
    if before is None:
        return None
    return nearest_influence_set(sets, speed_rpm=speed_rpm, planes=planes, unit=unit,
                                 learned_before=before)


def _trial_group(runs: Sequence[RunData], planes: int) -> tuple[RunData | None, list[RunData]]:
    """The latest group of consecutive trial runs and the run just before it."""
    last_trial = max((i for i, r in enumerate(runs) if r.purpose == "trial"), default=None)
    if last_trial is None:
        return None, []
    start = last_trial
    while start > 0 and runs[start - 1].purpose == "trial":
        start -= 1
    group = list(runs[start:last_trial + 1])
    ref = None
    for r in reversed(runs[:start]):
        if r.purpose in JUDGED_PURPOSES:
            ref = r
            break
    return ref, group


def coefficients_from_trials(
    runs: Sequence[RunData], radii_mm: Sequence[float]
) -> tuple[Coefficients | None, str]:
    """Influence coefficients from the job's latest trial runs (one per plane).

    Both procedures of :func:`shopapp.balancing.influence.influence_coefficients`:
    ``left_on`` when the later trial run says the earlier trial mass stayed on.
    """
    planes = len(radii_mm)
    ref, group = _trial_group(runs, planes)
    if not group:
        return None, ""
    if ref is None:
        return None, "Trial runs need an initial run before them to compare with."
    by_plane: dict[int, RunData] = {}
    for r in group:
        if r.trial_plane is not None:
            by_plane[r.trial_plane] = r
    missing = [p for p in range(1, planes + 1) if p not in by_plane]
    if missing:
        return None, f"Log a trial run for plane {missing[0]} to compute the correction."
    chosen = sorted(by_plane.values(), key=lambda r: r.seq)
    left_on = any(r.earlier_trial_left_on for r in chosen[1:])
    if left_on and len(group) != planes:
        return None, ("Trial masses were left on, but a plane was tried twice: log the "
                      "trial runs again, one per plane, to avoid mixing them up.")
    procedure = "left_on" if left_on else "removed"
    warnings: list[str] = []
    for r in [*chosen]:
        if r.unit != ref.unit:
            return None, f"Run {r.seq} is in {r.unit}, run {ref.seq} in {ref.unit}: use one unit."
        if not _same_speed(r.speed_rpm, ref.speed_rpm):
            warnings.append(
                f"Trial run {r.seq} ran at {quantity(r.speed_rpm, 'rpm')}, run {ref.seq} at "
                f"{quantity(ref.speed_rpm, 'rpm')}: influence coefficients change with speed."
            )
    trials = []
    for r in chosen:
        assert r.trial_plane is not None and r.trial_mass_g is not None
        assert r.trial_angle_deg is not None and r.trial_radius_mm is not None
        mass_at_r = influence.mass_at_radius(
            r.trial_mass_g, r.trial_radius_mm, radii_mm[r.trial_plane - 1]
        )
        trials.append(influence.TrialRun(r.trial_plane, mass_at_r, r.trial_angle_deg, r.readings))
    ic = influence.influence_coefficients(ref.readings, trials, procedure=procedure)
    return Coefficients(
        source="trials",
        matrix=ic.matrix(),
        unit=ref.unit,
        speed_rpm=ref.speed_rpm,
        condition_number=ic.condition_number,
        procedure=procedure,
        reference_run_id=ref.run_id,
        trial_run_ids=tuple(r.run_id for r in chosen),
        warnings=tuple(warnings) + ic.warnings,
    ), ""


def calibrated_coefficients(radii_mm: Sequence[float]) -> Coefficients:
    """A calibrated machine reads g·mm per plane: a mass W at R changes it by W·R."""
    return Coefficients("calibrated", np.diag(np.array(radii_mm, dtype=complex)),
                        CALIBRATED_UNIT, None, max(radii_mm) / min(radii_mm))


def unbalance_gmm(
    run: RunData, coeffs: Coefficients | None, radii_mm: Sequence[float]
) -> tuple[tuple[complex, ...] | None, str]:
    """The rotor's unbalance per correction plane (g·mm) shown by one run.

    g·mm readings are the unbalance; other units need the coefficients:
    ``U_g = A⁻¹·V`` (least squares), ``U_gmm = U_g·R``.
    """
    if len(run.readings) != len(radii_mm):
        return None, f"run {run.seq} has {len(run.readings)} readings for {len(radii_mm)} planes"
    if run.unit == CALIBRATED_UNIT:
        return run.readings, ""
    if coeffs is None or coeffs.source == "calibrated":
        return None, (f"readings in {run.unit} need influence coefficients (trial runs or a "
                      "stored set) to be turned into unbalance")
    if coeffs.unit != run.unit:
        return None, f"run {run.seq} is in {run.unit}, the coefficients in {coeffs.unit}"
    if coeffs.speed_rpm is not None and not _same_speed(run.speed_rpm, coeffs.speed_rpm):
        return None, (f"run {run.seq} at {quantity(run.speed_rpm, 'rpm')}; the coefficients "
                      f"hold for {quantity(coeffs.speed_rpm, 'rpm')} ±5 %")
    u_g = np.linalg.lstsq(coeffs.matrix, np.array(run.readings, dtype=complex), rcond=None)[0]
    return tuple(complex(u) * r for u, r in zip(u_g, radii_mm, strict=True)), ""


# --------------------------------------------------------------------------- verdict


def _row(label: str, value: complex, limit: float) -> VerdictRow:
    mag, ang = amplitude_angle(value)
    pct = 100.0 * mag / limit
    return VerdictRow(label, mag, ang, limit, pct, mag <= limit)


def judge(run: RunData, residual: tuple[complex, ...], tol: JobTolerance) -> RunVerdict:
    """Per-plane verdict: residual, limit, % of limit, in/out (ISO: bearing planes decide,
    with static and couple for overhung and narrow rotors)."""
    if tol.planes == 1:
        row = _row("plane 1", residual[0], tol.plane_limits_gmm[0])
        return RunVerdict(run.run_id, run.seq, run.purpose, True, row.passed, (row,), (),
                          "correction_planes", residual)
    assert tol.core is not None
    v = tolerance.judge_residual(residual[0], residual[1], tol.core, tol.geometry)

    def rows(pv: Any) -> tuple[VerdictRow, ...]:
        if pv is None:
            return ()
        return tuple(VerdictRow(p.plane, p.residual_gmm, p.angle_deg, p.limit_gmm,
                                100.0 * p.ratio, p.passed) for p in pv)

    deciding = v.bearing_planes if v.reference == "bearing_planes" else v.correction_planes
    other = v.correction_planes if v.reference == "bearing_planes" else v.bearing_planes
    # Overhung and narrow rotors: the static and couple rows decide with the bearing planes.
    return RunVerdict(run.run_id, run.seq, run.purpose, True, v.passed,
                      rows(deciding) + rows(v.static_couple), rows(other), v.reference, residual)


# --------------------------------------------------------------------------- advice


def correction_advice(
    current: RunData,
    coeffs: Coefficients,
    rt: RotorType,
    tol: JobTolerance | None,
    *,
    drill_diameter_mm: float = DEFAULT_DRILL_DIAMETER_MM,
    corrections: Sequence[Correction] = (),
    has_trial_runs: bool = False,
) -> CorrectionAdvice:
    """Correction answering ``current``: ``W = −A⁻¹·V`` (least squares), per plane.

    ``W`` is what still has to change: after a check run it is a trim on top of
    the weights already fitted (``corrections``: those in the run's reading,
    i.e. applied before it; the ones replaced since are left out), and the
    advice may merge it with one of them (:func:`shopapp.jobs.advice.plane_advice`).
    The predicted residual is what is left when the advice is fitted: the miss
    of rounding to the stock weights where the rotor type lists them
    (``|target − fitted|·R``), otherwise the masses rounded to 0.1 g and 1°
    (what a person can fit), ``U + W_fitted`` in g·mm; a warning follows when
    it is over the limit.
    """
    radii = plane_radii_mm(rt)
    sol = influence.correction_from_coefficients(coeffs.matrix, current.readings)
    warnings = list(coeffs.warnings) + [w for w in sol.warnings if w not in coeffs.warnings]
    cautions: list[str] = []
    planes_advised = []
    for c in sol.corrections:
        radius = radii[c.plane - 1]
        pa = plane_advice(c.plane, c.vector_g, rt, radius, drill_diameter_mm,
                          weights_on_rotor(corrections, c.plane, radius))
        planes_advised.append(pa)
        warnings.extend(pa.warnings)
        if pa.drill_refusal:
            warnings.append(pa.drill_refusal)
        if pa.drill or pa.drill_refusal:
            cautions.extend(x for x in removal.DRILLING_CAUTIONS if x not in cautions)
    exact = np.array([c.vector_g for c in sol.corrections])
    fitted = np.array([phasor(round(abs(w), 1), round(math.degrees(cmath.phase(w))))
                       for w in exact])
    # What is left, in grams at R: the unbalance the run shows (−W exact) plus what is fitted.
    left = [abs(complex(f - e)) * r for f, e, r in zip(fitted, exact, radii, strict=True)]
    for i, pa in enumerate(planes_advised):
        if pa.fit is not None and rt.stock_weights_g:
            left[i] = abs(pa.fit.residual_g) * radii[i]
    left_gmm = tuple(left)
    pct = None
    if tol is not None:
        pct = tuple(100.0 * u / lim for u, lim in zip(left_gmm, tol.plane_limits_gmm, strict=True))
        if any(p > 100.0 for p in pct):
            warnings.append("Predicted residual after fitting the rounded correction is still "
                            "out of tolerance: fit the masses more precisely.")
    if has_trial_runs:
        # A reminder, not a fault: shown with the cautions, not in red.
        cautions.append("The advice assumes every trial mass has been removed from the rotor.")
    return CorrectionAdvice(current.run_id, current.seq, coeffs.source, tuple(planes_advised),
                            left_gmm, pct, tuple(warnings), tuple(cautions))


# --------------------------------------------------------------------------- whole job


def _core_warnings(job: Job, rt: RotorType, machine: Machine | None, calc: JobCalc) -> None:
    if rt.first_critical_rpm is not None:
        try:
            rc = dynamics.rigid_or_flexible(job.service_speed_rpm, rt.first_critical_rpm)
            calc.warnings.extend(w[0].upper() + w[1:] + "." for w in rc.warnings)
        except BalancingInputError as exc:
            calc.warnings.append(f"Rigidity not checked: {exc}")
    if machine is not None and machine.suspension_resonance_rpm is not None:
        try:
            adv = dynamics.balancing_speed_advice(
                machine.bearing_kind, machine.suspension_resonance_rpm,
                proposed_speed_rpm=job.balancing_speed_rpm,
                max_permitted_speed_rpm=limits.highest_speed_rpm(machine, rt,
                                                                 job.service_speed_rpm),
                first_critical_rpm=rt.first_critical_rpm,
            )
            calc.warnings.extend(f"Balancing speed: {w}." for w in adv.warnings)
            calc.cautions.extend(c for c in adv.cautions
                                 if c not in calc.cautions and c not in COVERED_BY_PAGE_CAUTION)
        except BalancingInputError as exc:
            calc.warnings.append(f"Speed advice not computed: {exc}")
    if machine is not None and machine.claimed_emar_gmm_per_kg is not None and calc.tolerance:
        u_mar = machine.claimed_emar_gmm_per_kg * rt.mass_kg
        if u_mar > min(calc.tolerance.plane_limits_gmm):
            calc.warnings.append(
                "The machine's claimed minimum achievable residual "
                f"({quantity(u_mar, 'g·mm')} for this rotor) is above a plane limit: it may not "
                "reach this tolerance."
            )


def evaluate(
    job: Job,
    *,
    runs: Sequence[Run],
    corrections: Sequence[Correction] = (),
    influence_sets: Sequence[InfluenceSet] = (),
    drill_diameter_mm: float = DEFAULT_DRILL_DIAMETER_MM,
    arbor_error_gmm: Sequence[complex] | None = None,
) -> JobCalc:
    """Tolerance, coefficients, verdict per run, advice and warnings for a job.

    ``arbor_error_gmm``: a known arbor error (traceability, arbor frame, g·mm per
    plane) subtracted from every g·mm reading before anything is computed.

    ``runs`` must have their readings loaded; ``influence_sets`` are the stored
    sets of the job's rotor type and machine (any speed). Never raises on bad
    data: problems become notes.
    """
    rt = job.rotor.rotor_type
    radii = plane_radii_mm(rt)
    calc = JobCalc(planes=rt.planes)
    try:
        calc.tolerance = job_tolerance(job, rt)
    except BalancingInputError as exc:
        calc.tolerance_error = f"Tolerance cannot be computed: {exc}"
    _core_warnings(job, rt, job.machine, calc)

    data = [run_data(r) for r in sorted(runs, key=lambda r: r.seq) if r.readings]
    if arbor_error_gmm is not None:
        data = [_less_arbor_error(d, arbor_error_gmm) for d in data]
    # Coefficients: the job's own trials, else a stored set, else a calibrated machine.
    try:
        coeffs, note = coefficients_from_trials(data, radii)
    except BalancingInputError as exc:
        coeffs, note = None, f"Trial runs give no usable coefficients: {exc.message}"
    judged_runs = [r for r in data if r.purpose in JUDGED_PURPOSES]
    current = judged_runs[-1] if judged_runs else None
    if coeffs is None and not note and current is not None:
        stored = job_influence_set(job, influence_sets, runs, speed_rpm=current.speed_rpm,
                                   planes=rt.planes, unit=current.unit)
        if stored is not None:
            try:
                m = stored_matrix(stored)
                coeffs = Coefficients("stored", m, stored.reading_unit, stored.speed_rpm,
                                      float(np.linalg.cond(m)), stored=stored_set_info(stored))
            except (BalancingInputError, ValueError, TypeError) as exc:
                note = f"Stored coefficients {stored.id} are unusable: {exc}"
        elif current.unit == CALIBRATED_UNIT:
            coeffs = calibrated_coefficients(radii)
    calc.coefficients = coeffs
    calc.coefficients_note = note

    for r in judged_runs:
        residual, why = unbalance_gmm(r, coeffs, radii)
        if residual is None or calc.tolerance is None:
            calc.verdicts[r.run_id] = RunVerdict(
                r.run_id, r.seq, r.purpose, False, None,
                message=why or calc.tolerance_error, residual_gmm=residual or ())
            continue
        try:
            calc.verdicts[r.run_id] = judge(r, residual, calc.tolerance)
        except BalancingInputError as exc:
            calc.verdicts[r.run_id] = RunVerdict(r.run_id, r.seq, r.purpose, False, None,
                                                 message=str(exc), residual_gmm=residual)
    checks = [r for r in judged_runs if r.purpose in CHECK_PURPOSES]
    if checks:
        calc.last_check = calc.verdicts.get(checks[-1].run_id)

    if current is None:
        calc.advice_note = "Log an initial run to start."
    elif current.purpose in CHECK_PURPOSES and calc.last_check and calc.last_check.passed:
        calc.advice_note = f"Run {current.seq} is within tolerance in every plane."
    elif coeffs is None:
        calc.advice_note = note or (
            f"Readings in {current.unit}: log one trial run per plane (or use a calibrated "
            "machine reading g·mm) to compute the correction.")
    else:
        try:
            calc.advice = correction_advice(
                current, coeffs, rt, calc.tolerance, drill_diameter_mm=drill_diameter_mm,
                corrections=_in_reading(corrections, runs, current),
                has_trial_runs=any(r.purpose == "trial" for r in data))
        except BalancingInputError as exc:
            calc.advice_note = f"No correction computed: {exc}"

    if coeffs is None:
        _trial_mass_advice(job, rt, calc)
    return calc


def _in_reading(corrections: Sequence[Correction], runs: Sequence[Run], current: RunData
                ) -> list[Correction]:
    """Corrections applied before ``current`` was taken (so its reading includes them):
    those answering an earlier run, or without a run and recorded before it."""
    earlier = {r.id for r in runs if r.seq < current.seq}
    taken = next((r.taken_at for r in runs if r.id == current.run_id), None)
    return [c for c in corrections
            if (c.run_id in earlier) or (c.run_id is None and taken is not None
                                         and c.applied_at < taken)]


def _less_arbor_error(run: RunData, error_gmm: Sequence[complex]) -> RunData:
    """The run with a known arbor error taken off its g·mm readings (others unchanged)."""
    if run.unit != CALIBRATED_UNIT or len(error_gmm) != len(run.readings):
        return run
    return replace(run, readings=arbor.subtract_arbor_error(run.readings, list(error_gmm)))


def _trial_mass_advice(job: Job, rt: RotorType, calc: JobCalc) -> None:
    for radius in plane_radii_mm(rt):
        try:
            adv = influence.trial_mass_advice(rt.mass_kg, job.balancing_speed_rpm, radius,
                                              planes=rt.planes)
        except BalancingInputError:
            continue
        calc.trial_advice.append(adv)
        calc.trial_cautions.extend(c for c in adv.cautions if c not in calc.trial_cautions
                                   and c not in COVERED_BY_PAGE_CAUTION)


# --------------------------------------------------------------------------- polar plot


def polar_figures(
    calc: JobCalc,
    *,
    to_unit: Any,
    unit_label: str,
    angle_sense: str,
    angle_zero_deg: float,
    size: float = 260.0,
) -> list[Figure]:
    """One polar plot per correction plane: initial, each check run, final residual.

    ``to_unit`` converts g·mm to the shop's unit (a callable). Only runs that
    could be turned into unbalance are drawn.
    """
    figures = []
    judged = [v for v in sorted(calc.verdicts.values(), key=lambda v: v.seq)
              if v.residual_gmm and v.judged]
    for plane in range(calc.planes):
        vectors: list[PolarVector] = []
        checks = [v for v in judged if v.purpose in CHECK_PURPOSES]
        initial = next((v for v in judged if v.purpose == "initial"), None)
        if initial is not None:
            mag, ang = amplitude_angle(initial.residual_gmm[plane])
            vectors.append(PolarVector(f"initial (run {initial.seq})", to_unit(mag), ang,
                                       "initial"))
        for i, v in enumerate(checks):
            mag, ang = amplitude_angle(v.residual_gmm[plane])
            last = i == len(checks) - 1
            vectors.append(PolarVector(
                f"{'residual' if last else 'check'} (run {v.seq})", to_unit(mag), ang,
                "residual" if last else "check"))
        limit = None
        if calc.tolerance is not None:
            limit = to_unit(calc.tolerance.plane_limits_gmm[plane])
        figures.append(polar_figure(
            vectors, limit=limit, angle_sense=angle_sense, angle_zero_deg=angle_zero_deg,
            title=f"Plane {plane + 1}", unit_label=unit_label, size=size,
        ))
    return figures
