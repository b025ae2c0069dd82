"""Past jobs brought over from spreadsheets: a rotor's history from before shopapp.

A use-case (docs/architecture.md, "Inside a feature package"): checks the role,
validates with :mod:`shopapp.core.checks`, flushes and writes its audit event; the
import (CLI or page) commits once.

A past job is finished work: it is stored in its terminal state ``dispatched`` (the rotor
has left the shop, so it never counts as an open job of the rotor, the customer or the
machine), with one :class:`~shopapp.models.ImportedJob` row (which marks it imported,
``Job.imported``) holding the final residual per plane (g·mm) and the verdict as the old
records give it.
It has no runs, corrections or certificate, and never gets one: no certificate is issued
for it (there is no evidence to print), and the shop measures leave it out
(:mod:`shopapp.jobs.facts`: no facts row), so it never counts as first pass, rework,
turnaround or work in progress. The rotor's history page shows it as an imported visit
with its residual as a percentage of the job's tolerance.

Job numbers: the old number when given (unique across all jobs, like any job number);
without one, the next number of the shop's pattern for the day of receipt
(:mod:`shopapp.core.numbering`, under the same lock as intake).
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from shopapp.balancing.errors import BalancingInputError
from shopapp.core import audit
from shopapp.core.checks import Errors, date, number, text
from shopapp.core.errors import ValidationFailed
from shopapp.core.numbering import MAX_NUMBER_LENGTH
from shopapp.core.permissions import require
from shopapp.jobs import calc as job_calc
from shopapp.jobs.intake import ToleranceSpec, _insert_numbered, _tolerance_columns, today
from shopapp.models import ImportBatch, ImportedJob, Job, JobTransition, Machine, Rotor, User
from shopapp.registry.common import MAX_SPEED_RPM

MAX_RESIDUAL_GMM = 1.0e9  # the same bound as an explicit tolerance (registry.rotor_types)


def find_job_number(session: Session, job_number: str) -> Job | None:
    """The job with this number (ignoring case and outer spaces), or None."""
    wanted = job_number.strip().lower()
    if not wanted:
        return None
    return session.scalars(
        select(Job).where(func.lower(Job.number) == wanted).limit(1)).first()


def find_same_past_job(session: Session, rotor: Rotor, received_on: dt.date,
                       dispatched_on: dt.date) -> Job | None:
    """An imported job of ``rotor`` with the same dates (the same file applied twice)."""
    return session.scalars(
        select(Job).join(ImportedJob, ImportedJob.job_id == Job.id)
        .where(Job.rotor_id == rotor.id, Job.received_on == received_on,
               Job.dispatched_on == dispatched_on)
        .limit(1)).first()


def record_past_job(
    session: Session,
    *,
    by: User,
    rotor: Rotor,
    received_on: dt.date | None,
    dispatched_on: dt.date | None,
    residual_gmm: Sequence[float | None],
    passed: bool | None,
    residual_angle_deg: Sequence[float | str | None] = (),
    job_number: str = "",
    machine: Machine | None = None,
    tolerance: ToleranceSpec | None = None,
    balancing_speed_rpm: float | None = None,
    customer_order_ref: str = "",
    notes: str = "",
    batch: ImportBatch | None = None,
    source_row: int | None = None,
) -> Job:
    """Record a finished past job of ``rotor`` (module docstring).

    ``residual_gmm``: the final residual per correction plane in g·mm (one value per
    plane of the rotor type; ≥ 0); ``residual_angle_deg`` optional, 0 ≤ angle < 360;
    ``passed``: the old verdict (True in tolerance). ``tolerance`` defaults to the rotor
    type's; ``balancing_speed_rpm`` to the rotor type's permitted balancing speed, else
    its service speed (the old records seldom keep it; it is shown, never judged).

    Raises
    ------
    PermissionDenied
        ``by`` may not import history (``import_history``).
    ValidationFailed
        Every bad field: dates outside the window or dispatched before received, a
        residual missing, negative or beyond any real figure, a taken job number, an
        archived rotor or machine, a tolerance the rotor type cannot give.
    """
    require(by, "import_history")
    e = Errors()
    rt = rotor.rotor_type
    received = date(e, "received_on", received_on, not_after=today())
    dispatched = date(e, "dispatched_on", dispatched_on, not_after=today())
    if received is not None and dispatched is not None and dispatched < received:
        e.add("dispatched_on", f"{dispatched.isoformat()} is before the job was received "
              f"({received.isoformat()})")
    if rotor.archived:
        e.add("serial_number", f"rotor {rotor.serial_number} is archived; unarchive it first")
    if machine is not None and machine.archived:
        e.add("machine", f"{machine.name} is archived; unarchive it first")
    planes = rt.planes
    residuals = list(residual_gmm) + [None] * (2 - len(residual_gmm))
    angles: list[Any] = list(residual_angle_deg) + [None] * (2 - len(residual_angle_deg))
    clean_res: list[float | None] = []
    clean_ang: list[float | None] = []
    for k in (1, 2):
        wanted = k <= planes
        value = residuals[k - 1]
        if not wanted and value is not None:
            e.add(f"residual_{k}", f"rotor type {rt.part_number} has one correction plane; "
                  "leave plane 2 empty")
        clean_res.append(number(e, f"residual_{k}", value, required=wanted, minimum=0,
                                maximum=MAX_RESIDUAL_GMM, unit="g·mm") if wanted else None)
        clean_ang.append(number(e, f"residual_{k}_angle_deg", angles[k - 1], required=False,
                                minimum=0, maximum=359.999999, unit="°") if wanted else None)
    if passed is None:
        e.add("verdict", "is required: pass or fail, as the old records give it")
    bal = number(e, "balancing_speed_rpm", balancing_speed_rpm, required=False, above=0,
                 maximum=MAX_SPEED_RPM, unit="rpm")
    ref = text(e, "customer_order_ref", customer_order_ref, max_len=100)
    note_text = text(e, "notes", notes)
    wanted_number = text(e, "number", job_number, max_len=MAX_NUMBER_LENGTH)
    if wanted_number and find_job_number(session, wanted_number) is not None:
        e.add("number", f"job number {wanted_number!r} is already taken")
    cols = _tolerance_columns(e, tolerance, rt)
    e.raise_if_any()
    assert received is not None and dispatched is not None and clean_res[0] is not None

    job = Job(
        customer_id=rotor.customer_id, rotor=rotor, machine_id=machine.id if machine else None,
        state="dispatched", kind="new", customer_order_ref=ref,
        received_on=received, dispatched_on=dispatched, service_speed_rpm=rt.service_speed_rpm,
        balancing_speed_rpm=bal or rt.permitted_balancing_speed_rpm or rt.service_speed_rpm,
        notes=note_text, reopen_count=0, residual_test_required=False, **cols,
    )
    try:
        job_calc.job_tolerance(job, rt)
    except BalancingInputError as exc:
        raise ValidationFailed(exc.field, exc.message) from None
    # The job, its imported row and its transition go in one flush: the facts hook then
    # sees the job as imported at once (one refresh, no facts row in between).
    session.add(ImportedJob(
        job=job, batch_id=batch.id if batch is not None else None, source_row=source_row,
        residual_1_gmm=clean_res[0], residual_2_gmm=clean_res[1],
        residual_1_angle_deg=clean_ang[0], residual_2_angle_deg=clean_ang[1],
        passed=bool(passed)))
    session.add(JobTransition(job=job, from_state=None, to_state="dispatched",
                              reason="imported past job", by_id=by.id))
    if wanted_number:
        job.number = wanted_number
        session.add(job)
        session.flush()
    else:
        # The pending job has no number yet: no autoflush until it is given one.
        with session.no_autoflush:
            _insert_numbered(session, job)
    audit.record(session, by=by, entity="job", entity_id=job.id, action="import",
                 after=audit.snapshot(job), job_id=job.id)
    return job
