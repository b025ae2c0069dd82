"""Traceability on a job: arbor and its error, key convention, balance errors, the job
page's traceability panel and the checks and fields of a certificate.

The residual-unbalance test has its own module (:mod:`shopapp.jobs.residual_tests`).

Rules (sources beside each):

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

from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.balancing import balance_errors as errors_core
from shopapp.balancing.arbor import subtract_arbor_error
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.numtext import short
from shopapp.core import audit
from shopapp.core.checks import Errors as _Errors
from shopapp.core.checks import derived_row
from shopapp.core.checks import text as _text
from shopapp.core.clock import shop_date
from shopapp.core.display import counted
from shopapp.core.errors import TransitionRefused, ValidationFailed
from shopapp.core.permissions import require
from shopapp.jobs import calc as job_calc
from shopapp.jobs.residual_tests import (
    TEST_STATES,
    MassAdvice,
    ResidualTestState,
    plane_limits,
    require_residual_test_ok,
    residual_test_state,
    residual_tests_of,
    suggested_test_masses,
)
from shopapp.models import (
    Arbor,
    ArborErrorMeasurement,
    ArborErrorSubtraction,
    BalanceErrorEstimate,
    Job,
    ResidualTest,
    Run,
    User,
)
from shopapp.reports.traceability_section import ErrorLine, ResidualTestLine
from shopapp.traceability import services as traceability

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
        raise ValidationFailed("measurement_id", "that measurement has "
                               f"{counted(measurement.planes, 'plane')}; the rotor has {planes}")
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
    sub = arbor_subtraction(session, job)
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
    if error_gmm is None or unit != job_calc.CALIBRATED_UNIT or len(error_gmm) != len(readings):
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
        e.add("runs", f"{counted(len(runs), 'run')} given; at least {errors_core.MIN_RUNS} "
              "repeated runs are needed")
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
    derived_row(row)
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
        limits = plane_limits(job)
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
            select(Run.seq, Run.taken_at).where(Run.job_id == job.id, Run.struck_at.is_(None))
            .order_by(Run.seq)
        ).all()
        for seq, taken in runs:
            day = shop_date(taken)
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
            f"Key {short(comp.key_mass_g, 3)} g; the key is {short(abs(comp.piece_length_mm))} mm "
            f"{'longer' if comp.piece_length_mm > 0 else 'shorter'} than the hub: compensate "
            f"with {short(comp.correction_mass_g, 3)} g at {short(comp.correction_radius_mm)} mm, "
            f"{to_display_deg(comp.correction_angle_deg):.0f}° (half-key convention, "
            "½·ρ·b·h·(L_key − L_hub)·r_key).")
    out["arbor"] = ""
    if job.arbor_id is not None:
        arbor = session.get(Arbor, job.arbor_id)
        sub = arbor_subtraction(session, job)
        if arbor is not None:
            if sub is not None:
                m = sub.measurement
                errs = "; ".join(f"plane {p} {short(to_shop(abs(v)), 3)}"
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
                    systematic=", ".join(f"{k} {short(to_shop(x), 3)}" for k, x in parts.items()),
                    residual_shop=to_shop(v.residual_gmm), limit_shop=to_shop(v.limit_gmm),
                    effective_limit_shop=to_shop(v.effective_limit_gmm),
                    negligible=v.negligible, passed=v.passed, rule=v.rule))
            out["error_rule"] = f"{judgement.rule} (residual from the {judgement.source})"
    out["balance_errors"] = tuple(errors)
    return out
