"""The residual-unbalance verification test of a job (one plane at a time).

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

Use-cases here check the role, validate, flush and audit; they never commit.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.phasors import amplitude_angle, normalize_deg, phasor
from shopapp.balancing.verification import ResidualVerification, verify_residual
from shopapp.charts import Figure
from shopapp.charts.circle_fit import ReadingPoint, circle_fit_figure
from shopapp.core import audit
from shopapp.core.checks import Errors as _Errors
from shopapp.core.checks import derived_row
from shopapp.core.checks import number as _num
from shopapp.core.display import counted, plain, quantity
from shopapp.core.errors import TransitionRefused, ValidationFailed
from shopapp.core.permissions import can, require
from shopapp.jobs import calc as job_calc
from shopapp.models import READING_UNITS, RESIDUAL_TEST_POSITIONS, Customer, Job, ResidualTest, User
from shopapp.traceability import services as traceability

TEST_FACTORS = (1.0, 2.0)
SUGGESTED_FACTOR = 2.0
REPEAT_TOLERANCE = 0.10
# A residual test (and repeated check runs) are made while the rotor is on the machine.
TEST_STATES = ("on_machine", "in_tolerance")


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


def plane_limits(job: Job) -> tuple[float, ...]:
    """The job's limit per correction plane (g·mm); ValidationFailed when it cannot be had."""
    try:
        return job_calc.job_tolerance(job, job.rotor.rotor_type).plane_limits_gmm
    except BalancingInputError as exc:
        raise ValidationFailed("tolerance", f"the job's tolerance cannot be computed ({exc})"
                               ) from None


def plane_radius(job: Job, plane: int) -> float:
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
    limits = plane_limits(job)
    out = []
    for p, lim in enumerate(limits, start=1):
        r = plane_radius(job, p)
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
            f"The test unbalance ({quantity(t_gmm, 'g·mm')}) is outside {plain(lo)}–{plain(hi)} "
            f"× the plane's limit ({quantity(permissible_gmm, 'g·mm')}), the usual size "
            "(API-style residual check, common practice).")
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
    unit: str = job_calc.CALIBRATED_UNIT,
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
        raise ValidationFailed("plane", f"the rotor has {counted(planes, 'plane')}")
    if unit not in READING_UNITS:
        raise ValidationFailed("unit", f"choose one of {', '.join(READING_UNITS)}")
    limits = plane_limits(job)
    radius = test_radius_mm if test_radius_mm not in (None, "") else plane_radius(job, plane)
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
    derived_row(row)
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
    for test in sorted(tests, key=lambda t: (t.performed_at, t.id)):
        if test.plane in latest:
            latest[test.plane] = test
    problems: list[str] = []
    if job.residual_test_required:
        for p, t in latest.items():
            if t is None:
                problems.append(f"plane {p} has no residual-unbalance test")
            elif not t.valid:
                problems.append(f"plane {p}'s latest residual test is invalid ({t.invalid_reason})")
            elif not t.within_tolerance:
                problems.append(f"plane {p}'s residual test shows "
                                f"{quantity(t.residual_gmm, 'g·mm')}, above the limit "
                                f"{quantity(t.permissible_gmm, 'g·mm')}")
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


def _test_figure(
    pts: Sequence[ReadingPoint], *, method: str | None, circle_radius: float | None,
    residual_ratio: float | None, residual_angle_deg: float | None, plane: int, unit: str,
    angle_sense: str, angle_zero_deg: float, size: float,
) -> Figure:
    """A residual test's polar plot: the readings and the fitted circle.

    The centre of the fitted circle (phase method) is the mean of the readings:
    for equally spaced positions that *is* the least-squares centre, since the
    ``e^{iθ_k}`` sum to zero.
    """
    shown = method or ("phase" if pts and pts[0].angle_deg is not None else "amplitude")
    centre_amp = centre_ang = None
    if shown == "phase" and all(p.angle_deg is not None for p in pts):
        z = np.array([phasor(p.amplitude, p.angle_deg or 0.0) for p in pts])
        centre_amp, centre_ang = amplitude_angle(complex(z.mean()))
    return circle_fit_figure(
        list(pts), method=shown, circle_radius=circle_radius,
        centre_amplitude=centre_amp, centre_angle_deg=centre_ang,
        residual_ratio=residual_ratio, residual_angle_deg=residual_angle_deg,
        angle_sense=angle_sense, angle_zero_deg=angle_zero_deg,
        title=f"Plane {plane} residual test", unit_label=unit, size=size,
    )


def residual_test_figure(
    test: ResidualTest, *, angle_sense: str = "with_rotation", angle_zero_deg: float = 0.0,
    size: float = 240.0,
) -> Figure:
    """A stored test's polar plot (:mod:`shopapp.charts.circle_fit`)."""
    pts = [ReadingPoint(float(r["position_deg"]), float(r["amplitude"]),
                        None if r.get("angle_deg") is None else float(r["angle_deg"]))
           for r in test.readings]
    ratio = (test.residual_gmm / test.test_unbalance_gmm
             if test.residual_gmm is not None else None)
    return _test_figure(pts, method=test.method,
                        circle_radius=test.circle_radius if test.valid else None,
                        residual_ratio=ratio, residual_angle_deg=test.residual_angle_deg,
                        plane=test.plane, unit=test.unit, angle_sense=angle_sense,
                        angle_zero_deg=angle_zero_deg, size=size)


def outcome_figure(
    outcome: ResidualOutcome, *, unit: str, angle_sense: str = "with_rotation",
    angle_zero_deg: float = 0.0, size: float = 240.0,
) -> Figure:
    """The plot of a computed (not yet saved) residual test; see :func:`residual_test_figure`."""
    res = outcome.result
    return _test_figure(outcome.points, method=None if res is None else res.method,
                        circle_radius=res.circle_radius if res is not None and outcome.valid
                        else None,
                        residual_ratio=None if res is None else res.residual_ratio,
                        residual_angle_deg=None if res is None else res.angle_deg,
                        plane=outcome.plane, unit=unit, angle_sense=angle_sense,
                        angle_zero_deg=angle_zero_deg, size=size)
