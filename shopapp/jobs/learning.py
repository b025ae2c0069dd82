"""Learned influence sets: store a job's own coefficients, fix the set a job's corrections
came from, and score how well a stored set predicted the next check run.

Called by the use-cases of :mod:`shopapp.jobs.states` (in tolerance),
:mod:`shopapp.jobs.corrections` and :mod:`shopapp.jobs.runs`, inside their transaction.
"""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.balancing.errors import BalancingInputError
from shopapp.core import audit
from shopapp.jobs import advice
from shopapp.jobs import calc as job_calc
from shopapp.jobs.queries import evaluate, influence_sets_for
from shopapp.models import InfluenceSet, Job, Run, User, utcnow


def learn_coefficients(session: Session, job: Job, calc: job_calc.JobCalc, *, by: User
                       ) -> InfluenceSet | None:
    """Store the job's own influence coefficients for its rotor type, machine and speed.

    Done when a job with trial runs reaches in_tolerance (single- and
    two-plane); a job reaching tolerance again after a reopen updates the set
    it learned before instead of adding a second one.
    """
    c = calc.coefficients
    if c is None or c.source != "trials" or job.machine_id is None or c.speed_rpm is None:
        return None
    rt_id = job.rotor.rotor_type_id
    existing = session.scalars(select(InfluenceSet).where(
        InfluenceSet.source_job_id == job.id, InfluenceSet.rotor_type_id == rt_id,
        InfluenceSet.machine_id == job.machine_id)).first()
    values = {"speed_rpm": c.speed_rpm, "planes": calc.planes, "coefficients": c.as_json(),
              "reading_unit": c.unit, "condition_number": c.condition_number}
    if existing is not None:
        before = audit.snapshot(existing)
        for k, v in values.items():
            setattr(existing, k, v)
        existing.learned_at = utcnow()
        row, action = existing, "relearn"
    else:
        before = None
        row = InfluenceSet(rotor_type_id=rt_id, machine_id=job.machine_id, source_job_id=job.id,
                           **values)
        session.add(row)
        action = "learn"
    session.flush()
    audit.record(session, by=by, entity="influence_set", entity_id=row.id, action=action,
                 before=before, after=audit.snapshot(row), job_id=job.id)
    return row


def record_influence_set(session: Session, job: Job, run_id: int | None, *, by: User) -> None:
    """Fix the stored set on the job when its first correction follows that set's advice.

    From then on the job is judged with this set whatever is learned later
    (:func:`shopapp.jobs.calc.job_influence_set`). Jobs with trial runs
    of their own, or already fixed, cost no evaluation.
    """
    if job.influence_set_id is not None or job.machine_id is None:
        return
    if any(r.purpose == "trial" for r in job.runs):
        return
    calc = evaluate(session, job)
    c = calc.coefficients
    if c is None or c.source != "stored" or c.stored is None:
        return
    if run_id is not None and calc.advice is not None and calc.advice.run_id != run_id:
        return
    job.influence_set_id = c.stored.id
    session.flush()
    audit.record(session, by=by, entity="job", entity_id=job.id, action="use_influence_set",
                 before={"influence_set_id": None}, after={"influence_set_id": c.stored.id},
                 job_id=job.id)


def score_stored_set(session: Session, job: Job, run: Run, *, by: User) -> None:
    """After a check run of a job corrected from a stored set: how well did it predict?

    ``last_prediction_error_pct = ‖V0 + A·W_applied − V_check‖ / ‖V0‖ · 100``
    (:func:`shopapp.jobs.advice.prediction_error_pct`), V0 the run the corrections answered.
    """
    data = [job_calc.run_data(r) for r in sorted(job.runs, key=lambda r: r.seq) if r.readings]
    if any(r.purpose == "trial" for r in data):
        return  # the job used its own coefficients
    judged = [r for r in data if r.purpose in job_calc.JUDGED_PURPOSES and r.run_id != run.id]
    if not judged:
        return
    before_run = judged[-1]
    answering = [c for c in job.corrections if c.run_id == before_run.run_id]
    if not answering:
        return
    stored = job_calc.job_influence_set(job, influence_sets_for(session, job), job.runs,
                                        speed_rpm=before_run.speed_rpm,
                                        planes=job.rotor.rotor_type.planes,
                                        unit=before_run.unit)
    if stored is None:
        return
    current = job_calc.run_data(run)
    if current.unit != stored.reading_unit:
        return
    radii = job_calc.plane_radii_mm(job.rotor.rotor_type)
    applied = [advice.applied_vector_g(answering, p + 1, r) for p, r in enumerate(radii)]
    try:
        err = advice.prediction_error_pct(job_calc.stored_matrix(stored), before_run.readings,
                                          applied, current.readings)
    except BalancingInputError:
        return
    before = audit.snapshot(stored, ["last_prediction_error_pct", "last_used_at"])
    stored.last_prediction_error_pct = err
    stored.last_used_at = utcnow()
    session.flush()
    audit.record(session, by=by, entity="influence_set", entity_id=stored.id,
                 action="prediction_scored", before=before,
                 after=audit.snapshot(stored, ["last_prediction_error_pct", "last_used_at"]),
                 job_id=job.id)
