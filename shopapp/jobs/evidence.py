"""Traceability on a job: residual-unbalance test, arbor and its error, key convention,
balance errors, and the checks a certificate must pass.

Rules (sources beside each):

- **Residual test required** when the customer asks for it on all their jobs
  (``Customer.requires_residual_test``) or the tolerance is 4W/N (API-style
  jobs usually call for the check — common practice); set at intake, may be
  switched per job (on by the shop floor, off only by the quality role).
- **Test unbalance** ``T`` of 1–2 × the plane's limit (from memory of the
  API-style residual-unbalance check, e.g. the API 610/617 annex; common
  practice). The page proposes 2 × (the residual then stays well below ``T``,
  which the amplitude-only evaluation needs) and warns outside 1–2 ×.
- **Positions**: 6, 8 or 12 equally spaced (common practice), then a **repeat
  of position 1**; it must agree with the first reading within
  :data:`REPEAT_TOLERANCE` (10 %) of the fitted circle's radius — the reading
  change one test unbalance makes (judgement, same scale as the fit checks of
  :mod:`shopapp.balancing.verification`).
- **Invalid test**: the readings do not describe a circle, the residual cannot
  be told from the test unbalance, or the repeat disagrees — stored with that
  reason; only the latest test of a plane counts, and a job that requires the
  test is certified only when every plane's latest test is valid and within
  its limit.
- **Balance errors** (:mod:`shopapp.balancing.balance_errors`, ISO 21940-14
  idea from memory): random error from ≥ 3 repeated check runs without
  touching the rotor (g·mm readings), plus the arbor error when the job did not
  subtract it, plus an uncompensated half-key correction (counted in every
  plane: its axial place is not on record — conservative); verdict
  ``U_res ≤ U_per − ΔU``, or ``U_res ≤ U_per`` when ``ΔU ≤ 10 %`` of it.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.balancing import balance_errors as errors_core
from shopapp.balancing.arbor import subtract_arbor_error
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.phasors import amplitude_angle, normalize_deg, phasor
from shopapp.balancing.verification import ResidualVerification, verify_residual
from shopapp.charts import Figure
from shopapp.charts.circle_fit import ReadingPoint, circle_fit_figure
from shopapp.core import audit
from shopapp.core.checks import Errors as _Errors
from shopapp.core.checks import number as _num
from shopapp.core.checks import text as _text
from shopapp.core.errors import TransitionRefused, ValidationFailed
from shopapp.core.permissions import can, require
from shopapp.jobs import calc as job_calc
from shopapp.models import (
    READING_UNITS,
    RESIDUAL_TEST_POSITIONS,
    Arbor,
    ArborErrorMeasurement,
    ArborErrorSubtraction,
    BalanceErrorEstimate,
    Customer,
    Job,
    ResidualTest,
    Run,
    User,
)
from shopapp.reports.traceability_section import ErrorLine, ResidualTestLine
from shopapp.traceability import services as traceability

TEST_FACTORS = (1.0, 2.0)
SUGGESTED_FACTOR = 2.0
REPEAT_TOLERANCE = 0.10
TEST_STATES = ("on_machine", "in_tolerance")
CALIBRATED_UNIT = "g·mm"


def default_residual_test_required(customer: Customer, tolerance_method: str) -> bool:
    """Intake default: the customer's option, or on for a 4W/N tolerance (module docstring)."""
    return bool(customer.requires_residual_test) or tolerance_method == "4w/n"


def set_residual_test_required(session: Session, job: Job, *, by: User, required: bool) -> Job:
    """Switch the job's residual-test option; switching it *off* needs the quality role."""
    require(by, "work_jobs")
    if not required and job.residual_test_required and not can(by, "issue_certificates"):
        raise ValidationFailed("residual_test_required",
                               "only the quality role may drop a required residual test")
    if job.state in ("certified", "dispatched", "rejected"):
        raise TransitionRefused(f"Job {job.number} is {job.state}: its test option is fixed")
    before = {"residual_test_required": job.residual_test_required}
    job.residual_test_required = bool(required)
    session.flush()
    audit.record(session, by=by, entity="job", entity_id=job.id,
                 action="set_residual_test_required", before=before,
                 after={"residual_test_required": job.residual_test_required}, job_id=job.id)
    return job


def _plane_limits(job: Job) -> tuple[float, ...]:
    try:
        return job_calc.job_tolerance(job, job.rotor.rotor_type).plane_limits_gmm
    except BalancingInputError as exc:
        raise ValidationFailed("tolerance", f"the job's tolerance cannot be computed ({exc})"
                               ) from None


def _plane_radius(job: Job, plane: int) -> float:
    return job_calc.plane_radii_mm(job.rotor.rotor_type)[plane - 1]


# --------------------------------------------------------------------------- residual test


@dataclass(frozen=True)
class MassAdvice:
    """Test mass for one plane: 1–2 × the plane's limit at the plane's radius."""

    plane: int
    limit_gmm: float
    radius_mm: float
    low_g: float
    high_g: float
    suggested_g: float


def suggested_test_masses(job: Job) -> list[MassAdvice]:
    """Test mass per plane, ``m = k · U_limit / r`` with ``k`` 1–2 (2 suggested)."""
    limits = _plane_limits(job)
    out = []
    for p, lim in enumerate(limits, start=1):
        r = _plane_radius(job, p)
        out.append(MassAdvice(p, lim, r, TEST_FACTORS[0] * lim / r, TEST_FACTORS[1] * lim / r,
                                  SUGGESTED_FACTOR * lim / r))
    return out


@dataclass(frozen=True)
class ResidualOutcome:
    """Evaluation of a residual test (nothing stored)."""

    plane: int
    test_unbalance_gmm: float
    positions_deg: tuple[float, ...]
    points: tuple[ReadingPoint, ...]
    repeat: ReadingPoint | None
    permissible_gmm: float
    valid: bool
    reason: str
    result: ResidualVerification | None
    repeat_deviation: float | None
    warnings: tuple[str, ...]

    @property
    def within_tolerance(self) -> bool | None:
        return None if self.result is None else self.result.within_tolerance


def evaluate_residual_test(
    *,
    plane: int,
    test_mass_g: Any,
    test_radius_mm: Any,
    positions: Any,
    amplitudes: Sequence[Any],
    angles_deg: Sequence[Any] | None,
    repeat_amplitude: Any,
    repeat_angle_deg: Any = None,
    permissible_gmm: float,
    first_position_deg: float = 0.0,
) -> ResidualOutcome:
    """Evaluate a residual test: fit, repeat check, verdict (rules in the module docstring).

    Angles (positions and phases) are internal degrees. Bad *input* (missing or
    non-numeric readings, wrong count) raises ValidationFailed; a test whose
    readings fail the checks comes back ``valid=False`` with the reason.
    """
    e = _Errors()
    mass = _num(e, "test_mass_g", test_mass_g, above=0)
    radius = _num(e, "test_radius_mm", test_radius_mm, above=0)
    try:
        n = int(positions)
    except (TypeError, ValueError):
        n = 0
    if n not in RESIDUAL_TEST_POSITIONS:
        e.add("positions", f"choose {', '.join(str(p) for p in RESIDUAL_TEST_POSITIONS)} "
              "positions")
    e.raise_if_any()
    if len(amplitudes) != n:
        e.add("readings", f"need {n} readings, one per position")
    amps = [_num(e, f"amplitude_{k + 1}", a, minimum=0) for k, a in enumerate(amplitudes)]
    use_phase = angles_deg is not None and any(a not in (None, "") for a in angles_deg)
    angs: list[float | None] = [None] * len(amps)
    if use_phase:
        assert angles_deg is not None
        if len(angles_deg) != n or any(a in (None, "") for a in angles_deg):
            e.add("angles", "give a phase angle at every position, or none at all")
        else:
            angs = [_num(e, f"angle_{k + 1}", a) for k, a in enumerate(angles_deg)]
    rep_amp = _num(e, "repeat_amplitude", repeat_amplitude, minimum=0)
    rep_ang = None
    if use_phase:
        rep_ang = _num(e, "repeat_angle_deg", repeat_angle_deg)
    e.raise_if_any()
    assert mass is not None and radius is not None and rep_amp is not None
    t_gmm = mass * radius
    pos = traceability.equally_spaced_deg(n, first_position_deg)
    points = tuple(ReadingPoint(p, float(a), None if g is None else normalize_deg(g))  # type: ignore[arg-type]
                   for p, a, g in zip(pos, amps, angs, strict=True))
    repeat = ReadingPoint(pos[0], rep_amp, None if rep_ang is None else normalize_deg(rep_ang))
    warnings: list[str] = []
    lo, hi = TEST_FACTORS
    if not lo * permissible_gmm * (1 - 1e-9) <= t_gmm <= hi * permissible_gmm * (1 + 1e-9):
        warnings.append(
            f"The test unbalance ({t_gmm:.4g} g·mm) is outside {lo:g}–{hi:g} × the plane's "
            f"limit ({permissible_gmm:.4g} g·mm), the usual size (API-style residual check, "
            "from memory; common practice).")
    try:
        res = verify_residual(t_gmm, pos, [p.amplitude for p in points],
                              [p.angle_deg for p in points] if use_phase else None,  # type: ignore[misc]
                              permissible_gmm=permissible_gmm)
    except BalancingInputError as exc:
        return ResidualOutcome(plane, t_gmm, pos, points, repeat, permissible_gmm, False,
                               f"Invalid test: {exc.message}.", None, None, tuple(warnings))
    warnings.extend(res.warnings)
    first = points[0]
    if use_phase:
        assert first.angle_deg is not None and repeat.angle_deg is not None
        diff = abs(phasor(repeat.amplitude, repeat.angle_deg) - phasor(first.amplitude,
                                                                       first.angle_deg))
    else:
        diff = abs(repeat.amplitude - first.amplitude)
    deviation = diff / res.circle_radius
    if deviation > REPEAT_TOLERANCE:
        reason = (f"Invalid test: the repeat of position 1 differs from the first reading by "
                  f"{100 * deviation:.0f} % of the circle radius (limit "
                  f"{100 * REPEAT_TOLERANCE:.0f} %): the rotor or the machine changed during "
                  "the test; repeat it.")
        return ResidualOutcome(plane, t_gmm, pos, points, repeat, permissible_gmm, False, reason,
                               res, deviation, tuple(warnings))
    return ResidualOutcome(plane, t_gmm, pos, points, repeat, permissible_gmm, True, "", res,
                           deviation, tuple(warnings))


def record_residual_test(
    session: Session,
    job: Job,
    *,
    by: User,
    plane: int,
    test_mass_g: Any,
    positions: Any,
    amplitudes: Sequence[Any],
    repeat_amplitude: Any,
    angles_deg: Sequence[Any] | None = None,
    repeat_angle_deg: Any = None,
    test_radius_mm: Any = None,
    first_position_deg: float = 0.0,
    unit: str = CALIBRATED_UNIT,
    performed_at: dt.datetime | None = None,
) -> ResidualTest:
    """Store a residual test of one plane, valid or invalid (with the reason).

    Needs ``work_jobs``; the job must be on the machine or in tolerance.
    ``performed_at``: a past moment for historical records (the demo shop);
    default now.
    """
    require(by, "work_jobs")
    if job.state not in TEST_STATES:
        raise TransitionRefused(f"Job {job.number} is {job.state.replace('_', ' ')}: a residual "
                                "test is made while the rotor is on the machine or in tolerance")
    planes = job.rotor.rotor_type.planes
    if plane not in range(1, planes + 1):
        raise ValidationFailed("plane", f"the rotor has {planes} plane(s)")
    if unit not in READING_UNITS:
        raise ValidationFailed("unit", f"choose one of {', '.join(READING_UNITS)}")
    limits = _plane_limits(job)
    radius = test_radius_mm if test_radius_mm not in (None, "") else _plane_radius(job, plane)
    out = evaluate_residual_test(
        plane=plane, test_mass_g=test_mass_g, test_radius_mm=radius, positions=positions,
        amplitudes=amplitudes, angles_deg=angles_deg, repeat_amplitude=repeat_amplitude,
        repeat_angle_deg=repeat_angle_deg, permissible_gmm=limits[plane - 1],
        first_position_deg=first_position_deg,
    )
    res = out.result
    row = ResidualTest(
        job_id=job.id,
        plane=plane,
        test_mass_g=float(test_mass_g),
        test_radius_mm=float(radius),
        test_unbalance_gmm=out.test_unbalance_gmm,
        positions=len(out.positions_deg),
        unit=unit,
        readings=[{"position_deg": p.position_deg, "amplitude": p.amplitude,
                   "angle_deg": p.angle_deg} for p in out.points],
        repeat=None if out.repeat is None else {"amplitude": out.repeat.amplitude,
                                                "angle_deg": out.repeat.angle_deg},
        method=None if res is None else res.method,
        residual_gmm=None if res is None or not out.valid else res.residual_gmm,
        residual_angle_deg=None if res is None or not out.valid else res.angle_deg,
        fit_rms_relative=None if res is None else res.fit_rms_relative,
        circle_radius=None if res is None else res.circle_radius,
        permissible_gmm=out.permissible_gmm,
        within_tolerance=None if res is None or not out.valid else res.within_tolerance,
        valid=out.valid,
        invalid_reason=out.reason,
        warnings=list(out.warnings),
        performed_by_id=by.id,
    )
    if performed_at is not None:
        if performed_at.tzinfo is None or performed_at > dt.datetime.now(dt.UTC):
            raise ValidationFailed("performed_at", "must be a past moment with its time zone")
        row.performed_at = performed_at
    session.add(row)
    session.flush()
    event = audit.record(session, by=by, entity="residual_test", entity_id=row.id,
                         action="record", after=audit.snapshot(row), job_id=job.id)
    if performed_at is not None:
        event.at = performed_at
    return row


def residual_tests_of(session: Session, job: Job, *, as_of: dt.datetime | None = None
                      ) -> list[ResidualTest]:
    """The residual tests of the job (made up to ``as_of`` when given), oldest first."""
    q = select(ResidualTest).where(ResidualTest.job_id == job.id)
    if as_of is not None:
        q = q.where(ResidualTest.performed_at <= as_of)
    return list(session.scalars(q.order_by(ResidualTest.performed_at, ResidualTest.id)))


@dataclass(frozen=True)
class ResidualTestState:
    """The job's residual-test standing: the latest test per plane and what is missing."""

    required: bool
    planes: int
    latest: dict[int, ResidualTest | None]
    problems: tuple[str, ...]

    @property
    def ok(self) -> bool:
        return not self.problems


def residual_test_state(job: Job, tests: Sequence[ResidualTest]) -> ResidualTestState:
    """Pure: the latest test of each plane and why the job may not be certified on it."""
    planes = job.rotor.rotor_type.planes
    latest: dict[int, ResidualTest | None] = {p: None for p in range(1, planes + 1)}
    for t in sorted(tests, key=lambda t: (t.performed_at, t.id)):
        if t.plane in latest:
            latest[t.plane] = t
    problems: list[str] = []
    if job.residual_test_required:
        for p, t in latest.items():
            if t is None:
                problems.append(f"plane {p} has no residual-unbalance test")
            elif not t.valid:
                problems.append(f"plane {p}'s latest residual test is invalid ({t.invalid_reason})")
            elif not t.within_tolerance:
                problems.append(f"plane {p}'s residual test shows {t.residual_gmm:.4g} g·mm, "
                                f"above the limit {t.permissible_gmm:.4g} g·mm")
    return ResidualTestState(job.residual_test_required, planes, latest, tuple(problems))


def require_residual_test_ok(session: Session, job: Job, *, as_of: dt.datetime | None = None
                             ) -> ResidualTestState:
    """Raise TransitionRefused when the job requires a residual test it lacks (or failed).

    ``as_of``: only the tests made up to that moment count (a historical certificate).
    """
    if not job.residual_test_required:
        return residual_test_state(job, ())  # nothing to check: no query
    state = residual_test_state(job, residual_tests_of(session, job, as_of=as_of))
    if not state.ok:
        raise TransitionRefused(
            f"Job {job.number} requires a residual-unbalance verification test: "
            f"{'; '.join(state.problems)}. Make (or repeat) the test on the job page.")
    return state


def residual_test_figure(
    test: ResidualTest, *, angle_sense: str = "with_rotation", angle_zero_deg: float = 0.0,
    size: float = 240.0,
) -> Figure:
    """The test's polar plot: the readings and the fitted circle (:mod:`charts.circle_fit`).

    The centre of the fitted circle (phase method) is the mean of the readings:
    for equally spaced positions that *is* the least-squares centre, since the
    ``e^{iθ_k}`` sum to zero.
    """
    pts = [ReadingPoint(float(r["position_deg"]), float(r["amplitude"]),
                        None if r.get("angle_deg") is None else float(r["angle_deg"]))
           for r in test.readings]
    centre_amp = centre_ang = None
    if test.method == "phase" and all(p.angle_deg is not None for p in pts):
        z = np.array([phasor(p.amplitude, p.angle_deg or 0.0) for p in pts])
        centre_amp, centre_ang = amplitude_angle(complex(z.mean()))
    ratio = (test.residual_gmm / test.test_unbalance_gmm
             if test.residual_gmm is not None else None)
    return circle_fit_figure(
        pts, method=test.method or ("phase" if pts and pts[0].angle_deg is not None
                                    else "amplitude"),
        circle_radius=test.circle_radius if test.valid else None,
        centre_amplitude=centre_amp, centre_angle_deg=centre_ang,
        residual_ratio=ratio, residual_angle_deg=test.residual_angle_deg,
        angle_sense=angle_sense, angle_zero_deg=angle_zero_deg,
        title=f"Plane {test.plane} residual test", unit_label=test.unit, size=size,
    )


# --------------------------------------------------------------------------- arbor on a job


def set_job_arbor(session: Session, job: Job, *, by: User, arbor: Arbor | None) -> Job:
    """Put the job on a shop arbor (or none); a changed arbor drops a chosen subtraction."""
    require(by, "work_jobs")
    if job.state in ("certified", "dispatched", "rejected"):
        raise TransitionRefused(f"Job {job.number} is {job.state}: its arbor is fixed")
    if arbor is not None and arbor.archived:
        raise ValidationFailed("arbor_id", f"arbor {arbor.name} is archived")
    before = {"arbor_id": job.arbor_id}
    new_id = arbor.id if arbor is not None else None
    if new_id != job.arbor_id:
        sub = arbor_subtraction(session, job)
        if sub is not None:
            session.delete(sub)
    job.arbor_id = new_id
    session.flush()
    audit.record(session, by=by, entity="job", entity_id=job.id, action="set_arbor",
                 before=before, after={"arbor_id": job.arbor_id}, job_id=job.id)
    return job


def arbor_subtraction(session: Session, job: Job) -> ArborErrorSubtraction | None:
    return session.scalars(
        select(ArborErrorSubtraction).where(ArborErrorSubtraction.job_id == job.id)
    ).first()


def set_arbor_subtraction(
    session: Session, job: Job, *, by: User, measurement: ArborErrorMeasurement | None
) -> ArborErrorSubtraction | None:
    """Subtract ``measurement`` (an error of the job's arbor) from the job's readings, or stop."""
    require(by, "work_jobs")
    if job.state in ("certified", "dispatched", "rejected"):
        raise TransitionRefused(f"Job {job.number} is {job.state}: its readings are fixed")
    current = arbor_subtraction(session, job)
    before = None if current is None else {"measurement_id": current.measurement_id}
    if measurement is None:
        if current is not None:
            session.delete(current)
            session.flush()
            audit.record(session, by=by, entity="job", entity_id=job.id,
                         action="stop_arbor_subtraction", before=before, job_id=job.id)
        return None
    if job.arbor_id is None or measurement.arbor_id != job.arbor_id:
        raise ValidationFailed("measurement_id", "choose a measured error of the job's arbor")
    planes = job.rotor.rotor_type.planes
    if measurement.planes != planes:
        raise ValidationFailed("measurement_id", f"that measurement has {measurement.planes} "
                               f"plane(s); the rotor has {planes}")
    if current is None:
        current = ArborErrorSubtraction(job_id=job.id, measurement_id=measurement.id, by_id=by.id)
        session.add(current)
    else:
        current.measurement_id = measurement.id
        current.by_id = by.id
    session.flush()
    audit.record(session, by=by, entity="job", entity_id=job.id, action="subtract_arbor_error",
                 before=before, after={"measurement_id": measurement.id}, job_id=job.id)
    return current


def arbor_error_gmm(session: Session, job: Job) -> tuple[complex, ...] | None:
    """The arbor error the job subtracts (arbor frame, g·mm per plane), or None (one query)."""
    if job.arbor_id is None:
        return None
    sub = session.scalars(
        select(ArborErrorSubtraction).where(ArborErrorSubtraction.job_id == job.id)
    ).first()
    if sub is None:
        return None
    return traceability.arbor_error_vector(sub.measurement)


def arbor_errors_for(session: Session, jobs: Sequence[Job]) -> dict[int, tuple[complex, ...]]:
    """:func:`arbor_error_gmm` of many jobs at once (job id → error; one query at most)."""
    ids = [j.id for j in jobs if j.arbor_id is not None]
    if not ids:
        return {}
    rows = session.execute(
        select(ArborErrorSubtraction.job_id, ArborErrorMeasurement)
        .join(ArborErrorMeasurement,
              ArborErrorMeasurement.id == ArborErrorSubtraction.measurement_id)
        .where(ArborErrorSubtraction.job_id.in_(ids))
    ).all()
    return {job_id: traceability.arbor_error_vector(m) for job_id, m in rows}


def corrected_readings(readings: tuple[complex, ...], unit: str,
                       error_gmm: tuple[complex, ...] | None) -> tuple[complex, ...]:
    """A run's g·mm readings less the arbor error (other units and mismatches unchanged)."""
    if error_gmm is None or unit != CALIBRATED_UNIT or len(error_gmm) != len(readings):
        return readings
    return subtract_arbor_error(readings, error_gmm)


# --------------------------------------------------------------------------- balance errors


def systematic_errors(
    session: Session, job: Job, *, key_compensation_applied: bool = False
) -> tuple[dict[int, dict[str, float]], list[str]]:
    """Known systematic errors per plane (g·mm) and notes on what is unknown."""
    rt = job.rotor.rotor_type
    planes = rt.planes
    out: dict[int, dict[str, float]] = {p: {} for p in range(1, planes + 1)}
    notes: list[str] = []
    if job.arbor_id is not None and arbor_subtraction(session, job) is None:
        arbor = session.get(Arbor, job.arbor_id)
        m = traceability.latest_arbor_error(session, arbor) if arbor is not None else None
        if m is None:
            notes.append("The job's arbor has no measured error: run the index test to know it.")
        else:
            for p, v in enumerate(traceability.arbor_error_vector(m), start=1):
                if p in out:
                    out[p]["arbor"] = abs(v)
    info = traceability.key_info(rt)
    if info.compensation is not None and not key_compensation_applied:
        du = abs(info.compensation.unbalance_gmm)
        if du > 0:
            for p in out:
                out[p]["key"] = du
    elif info.note:
        notes.append(info.note)
    return out, notes


def record_error_estimate(
    session: Session,
    job: Job,
    *,
    by: User,
    runs: Sequence[Sequence[Any]],
    key_compensation_applied: bool = False,
    notes: str = "",
) -> BalanceErrorEstimate:
    """Store repeated check runs (g·mm, ``[(amplitude, angle_deg), ...]`` per plane per run)
    and the ΔU per plane they give. Needs ``work_jobs``.
    """
    require(by, "work_jobs")
    if job.state not in TEST_STATES:
        raise TransitionRefused(f"Job {job.number} is {job.state.replace('_', ' ')}: repeated "
                                "check runs are made while the rotor is on the machine")
    planes = job.rotor.rotor_type.planes
    e = _Errors()
    note = _text(e, "notes", notes)
    vectors: list[list[complex]] = []
    for k, run in enumerate(runs, start=1):
        vectors.append(traceability._run_phasors(e, f"run_{k}", run, planes))
    if len(runs) < errors_core.MIN_RUNS:
        e.add("runs", f"{len(runs)} run(s) given; at least {errors_core.MIN_RUNS} repeated runs "
              "are needed")
    e.raise_if_any()
    random_gmm: list[float] = []
    for p in range(planes):
        try:
            random_gmm.append(errors_core.random_error([v[p] for v in vectors]).radius_gmm)
        except BalancingInputError as exc:
            raise ValidationFailed("runs", exc.message) from None
    systematic, _ = systematic_errors(session, job,
                                      key_compensation_applied=key_compensation_applied)
    delta = [errors_core.error_estimate(random_gmm[p], systematic[p + 1]).delta_u_gmm
             for p in range(planes)]
    row = BalanceErrorEstimate(
        job_id=job.id,
        planes=planes,
        runs=len(runs),
        readings=[[[float(a), float(g)] for a, g in run] for run in runs],
        random_1_gmm=random_gmm[0],
        random_2_gmm=random_gmm[1] if planes == 2 else None,
        systematic={str(p): v for p, v in systematic.items()},
        delta_u_1_gmm=delta[0],
        delta_u_2_gmm=delta[1] if planes == 2 else None,
        key_compensation_applied=bool(key_compensation_applied),
        notes=note,
        performed_by_id=by.id,
    )
    session.add(row)
    session.flush()
    audit.record(session, by=by, entity="balance_error_estimate", entity_id=row.id,
                 action="record", after=audit.snapshot(row), job_id=job.id)
    return row


def latest_error_estimate(session: Session, job: Job) -> BalanceErrorEstimate | None:
    return session.scalars(
        select(BalanceErrorEstimate).where(BalanceErrorEstimate.job_id == job.id)
        .order_by(BalanceErrorEstimate.performed_at.desc(), BalanceErrorEstimate.id.desc())
        .limit(1)
    ).first()


def delta_u(estimate: BalanceErrorEstimate) -> tuple[float, ...]:
    if estimate.planes == 2 and estimate.delta_u_2_gmm is not None:
        return (estimate.delta_u_1_gmm, estimate.delta_u_2_gmm)
    return (estimate.delta_u_1_gmm,)


@dataclass(frozen=True)
class ErrorJudgement:
    """Verdicts with ΔU per plane, and where the residual came from."""

    source: str
    verdicts: tuple[errors_core.ErrorVerdict, ...]

    @property
    def passed(self) -> bool:
        return all(v.passed for v in self.verdicts)

    @property
    def rule(self) -> str:
        rules = sorted({v.rule for v in self.verdicts})
        return "; ".join(rules)


def residual_for_verdict(
    job: Job, tests: Sequence[ResidualTest], calc: job_calc.JobCalc | None
) -> tuple[tuple[float, ...], str] | None:
    """Residual per plane to judge with ΔU: the valid residual tests, else the last check run."""
    state = residual_test_state(job, tests)
    latest = state.latest
    if latest and all(t is not None and t.valid and t.residual_gmm is not None
                      for t in latest.values()):
        return (tuple(float(t.residual_gmm) for t in latest.values()  # type: ignore[union-attr,arg-type]
                      ), "residual-unbalance test")
    if calc is not None and calc.last_check is not None and calc.last_check.judged:
        res = calc.last_check.residual_gmm
        if len(res) == state.planes:
            return tuple(abs(v) for v in res), f"run {calc.last_check.seq}"
    return None


def judge_errors(
    job: Job, estimate: BalanceErrorEstimate, residual: tuple[tuple[float, ...], str] | None
) -> ErrorJudgement | None:
    """Each plane's residual against ``limit − ΔU`` (or the limit when ΔU is negligible)."""
    if residual is None:
        return None
    values, source = residual
    try:
        limits = _plane_limits(job)
    except ValidationFailed:
        return None
    du = delta_u(estimate)
    if len(values) != len(limits) or len(du) != len(limits):
        return None
    verdicts = tuple(errors_core.judge_with_errors(r, lim, d)
                     for r, lim, d in zip(values, limits, du, strict=True))
    return ErrorJudgement(source, verdicts)


# --------------------------------------------------------------------------- the job's panel


@dataclass
class JobTraceability:
    """Everything the job page's traceability panel (and the certificate) shows."""

    job: Job
    received_standing: traceability.VerificationStatus | None = None
    overdue_runs: list[tuple[int, str]] = field(default_factory=list)
    tests: list[ResidualTest] = field(default_factory=list)
    test_state: ResidualTestState | None = None
    advice: list[MassAdvice] = field(default_factory=list)
    advice_note: str = ""
    arbor: Arbor | None = None
    arbors: list[Arbor] = field(default_factory=list)
    subtraction: ArborErrorSubtraction | None = None
    arbor_note: str = ""
    key: traceability.KeyInfo | None = None
    estimate: BalanceErrorEstimate | None = None
    judgement: ErrorJudgement | None = None
    error_notes: list[str] = field(default_factory=list)


def job_traceability(session: Session, job: Job, calc: job_calc.JobCalc | None = None
                     ) -> JobTraceability:
    """Gather the panel's data in a fixed handful of queries (never raises on stored data)."""
    out = JobTraceability(job=job)
    if job.machine is not None:
        records = traceability._records(session, job.machine)
        soon = traceability.get_settings(session).due_soon_days
        out.received_standing = traceability.status_from_records(job.machine, records,
                                                                 job.received_on, soon)
        runs = session.execute(
            select(Run.seq, Run.taken_at).where(Run.job_id == job.id).order_by(Run.seq)
        ).all()
        for seq, taken in runs:
            day = taken.astimezone(dt.UTC).date()
            st = traceability.status_from_records(job.machine, records, day, soon)
            if st.blocks:
                out.overdue_runs.append((seq, st.message()))
    out.tests = residual_tests_of(session, job)
    out.test_state = residual_test_state(job, out.tests)
    try:
        out.advice = suggested_test_masses(job)
    except ValidationFailed as exc:
        out.advice_note = exc.message
    out.arbors = traceability.arbors(session)
    if job.arbor_id is not None:
        out.arbor = next((a for a in out.arbors if a.id == job.arbor_id), None) or session.get(
            Arbor, job.arbor_id)
        out.subtraction = arbor_subtraction(session, job)
        if out.arbor is not None and out.arbor.measurements:
            m = out.subtraction.measurement if out.subtraction else out.arbor.measurements[-1]
            out.arbor_note = traceability.arbor_mass_note(m, job.rotor.rotor_type.mass_kg)
    out.key = traceability.key_info(job.rotor.rotor_type)
    out.estimate = latest_error_estimate(session, job)
    if out.estimate is not None:
        out.judgement = judge_errors(job, out.estimate, residual_for_verdict(job, out.tests, calc))
        if out.judgement is None:
            out.error_notes.append("No residual to judge with ΔU yet (log a check run in g·mm "
                                   "or make the residual test).")
    return out


# --------------------------------------------------------------------------- certificate


def check_certifiable(session: Session, job: Job, final_run_on: dt.date, *,
                      as_of: dt.datetime | None = None
                      ) -> traceability.VerificationStatus | None:
    """The traceability conditions of a certificate (raise with the reason).

    - the job's machine was not overdue or failed on the final run's date
      (:func:`shopapp.traceability.services.require_machine_current`);
    - a job that requires it has a valid residual test within the limit in every
      plane (:func:`require_residual_test_ok`; with ``as_of`` the tests made by then).

    Returns the machine's standing on that date (None without a machine).
    """
    standing = None
    if job.machine is not None:
        standing = traceability.require_machine_current(session, job.machine, final_run_on)
    require_residual_test_ok(session, job, as_of=as_of)
    return standing


def outcome_figure(
    outcome: ResidualOutcome, *, unit: str, angle_sense: str = "with_rotation",
    angle_zero_deg: float = 0.0, size: float = 240.0,
) -> Figure:
    """The plot of a computed (not yet saved) residual test; see :func:`residual_test_figure`."""
    res = outcome.result
    pts = list(outcome.points)
    centre_amp = centre_ang = None
    if res is not None and res.method == "phase":
        z = np.array([phasor(p.amplitude, p.angle_deg or 0.0) for p in pts])
        centre_amp, centre_ang = amplitude_angle(complex(z.mean()))
    return circle_fit_figure(
        pts, method=res.method if res is not None else (
            "phase" if pts and pts[0].angle_deg is not None else "amplitude"),
        circle_radius=res.circle_radius if res is not None and outcome.valid else None,
        centre_amplitude=centre_amp, centre_angle_deg=centre_ang,
        residual_ratio=None if res is None else res.residual_ratio,
        residual_angle_deg=None if res is None else res.angle_deg,
        angle_sense=angle_sense, angle_zero_deg=angle_zero_deg,
        title=f"Plane {outcome.plane} residual test", unit_label=unit, size=size,
    )


def certificate_fields(
    session: Session,
    job: Job,
    calc: job_calc.JobCalc | None,
    *,
    to_shop: Callable[[float], float],
    to_display_deg: Callable[[float], float],
    as_of: dt.datetime | None = None,
) -> dict[str, Any]:
    """The traceability fields of :class:`shopapp.reports.certificate.CertificateData`.

    Key convention statement (and the compensation when one is due), the arbor
    and its subtracted error, each plane's latest valid residual test with its
    readings for the plot, and the balance errors with the verdict rule used.
    ``to_shop`` converts g·mm to the shop's unit; ``to_display_deg`` internal
    angles to the shop's convention; ``as_of`` keeps to the tests made by then.
    """
    rt = job.rotor.rotor_type
    out: dict[str, Any] = {}
    info = traceability.key_info(rt)
    out["key_statement"] = info.statement if rt.key_convention != "none" else ""
    comp = info.compensation
    out["key_compensation"] = ""
    if comp is not None and comp.correction_mass_g > 0 and comp.correction_angle_deg is not None:
        out["key_compensation"] = (
            f"Key {comp.key_mass_g:.3g} g; the key is {abs(comp.piece_length_mm):g} mm "
            f"{'longer' if comp.piece_length_mm > 0 else 'shorter'} than the hub: compensate "
            f"with {comp.correction_mass_g:.3g} g at {comp.correction_radius_mm:g} mm, "
            f"{to_display_deg(comp.correction_angle_deg):.0f}° (half-key convention, "
            "½·ρ·b·h·(L_key − L_hub)·r_key).")
    out["arbor"] = ""
    if job.arbor_id is not None:
        arbor = session.get(Arbor, job.arbor_id)
        sub = arbor_subtraction(session, job)
        if arbor is not None:
            if sub is not None:
                m = sub.measurement
                errs = "; ".join(f"plane {p} {to_shop(abs(v)):.3g}"
                                 for p, v in enumerate(traceability.arbor_error_vector(m), 1))
                out["arbor"] = (f"Balanced on shop arbor {arbor.name}; its error measured on "
                                f"{m.measured_on} by index balancing ({errs}) was subtracted "
                                "from the readings.")
            else:
                out["arbor"] = (f"Balanced on shop arbor {arbor.name}; its error was not "
                                "subtracted.")
    tests = residual_tests_of(session, job, as_of=as_of)
    state = residual_test_state(job, tests)
    lines = []
    for t in state.latest.values():
        if t is None or not t.valid or t.residual_gmm is None or t.circle_radius is None:
            continue
        lines.append(ResidualTestLine(
            plane=t.plane, test_mass_g=t.test_mass_g, test_radius_mm=t.test_radius_mm,
            test_unbalance_gmm=t.test_unbalance_gmm, positions=t.positions,
            method=t.method or "phase", reading_unit=t.unit, residual_gmm=t.residual_gmm,
            residual_shop=to_shop(t.residual_gmm),
            residual_angle_deg=(None if t.residual_angle_deg is None
                                else to_display_deg(t.residual_angle_deg)),
            limit_gmm=t.permissible_gmm or 0.0, limit_shop=to_shop(t.permissible_gmm or 0.0),
            passed=bool(t.within_tolerance), fit_rms_pct=100.0 * (t.fit_rms_relative or 0.0),
            circle_radius=t.circle_radius,
            readings=tuple((to_display_deg(float(r["position_deg"])), float(r["amplitude"]),
                            None if r.get("angle_deg") is None
                            else to_display_deg(float(r["angle_deg"])))
                           for r in t.readings),
        ))
    out["residual_tests"] = tuple(lines)
    errors: list[ErrorLine] = []
    out["error_rule"] = ""
    est = latest_error_estimate(session, job)
    if est is not None:
        judgement = judge_errors(job, est, residual_for_verdict(job, tests, calc))
        if judgement is not None:
            randoms = (est.random_1_gmm, est.random_2_gmm)
            for p, v in enumerate(judgement.verdicts, start=1):
                parts = (est.systematic or {}).get(str(p), {})
                errors.append(ErrorLine(
                    plane=p, delta_u_gmm=v.delta_u_gmm, delta_u_shop=to_shop(v.delta_u_gmm),
                    random_shop=to_shop(randoms[p - 1] or 0.0),
                    systematic=", ".join(f"{k} {to_shop(x):.3g}" for k, x in parts.items()),
                    residual_shop=to_shop(v.residual_gmm), limit_shop=to_shop(v.limit_gmm),
                    effective_limit_shop=to_shop(v.effective_limit_gmm),
                    negligible=v.negligible, passed=v.passed, rule=v.rule))
            out["error_rule"] = f"{judgement.rule} (residual from the {judgement.source})"
    out["balance_errors"] = tuple(errors)
    return out
