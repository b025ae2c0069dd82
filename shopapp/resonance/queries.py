"""Read-only selects of the resonance pages (no writes, no rules)."""

from __future__ import annotations

from sqlalchemy import Select, select
from sqlalchemy.orm import Session, joinedload, selectinload

from shopapp.models import Job, Machine, RunUpRecord

PANEL_LIMIT = 10


def run_up(session: Session, record_id: int) -> RunUpRecord | None:
    """One run-up with its readings, job and machine."""
    return session.scalars(
        select(RunUpRecord).where(RunUpRecord.id == record_id).options(
            selectinload(RunUpRecord.points), joinedload(RunUpRecord.job),
            joinedload(RunUpRecord.machine), joinedload(RunUpRecord.by),
        )
    ).first()


def _newest_first(stmt: Select[RunUpRecord]) -> Select[RunUpRecord]:
    return stmt.order_by(RunUpRecord.recorded_on.desc(), RunUpRecord.id.desc()).options(
        selectinload(RunUpRecord.points), joinedload(RunUpRecord.job),
        joinedload(RunUpRecord.machine),
    )


def job_run_ups(session: Session, job: Job, limit: int = PANEL_LIMIT) -> list[RunUpRecord]:
    """A job's run-ups, newest first."""
    stmt = _newest_first(select(RunUpRecord).where(RunUpRecord.job_id == job.id))
    return list(session.scalars(stmt.limit(limit)))


def machine_run_ups(session: Session, machine: Machine,
                    limit: int = PANEL_LIMIT) -> list[RunUpRecord]:
    """Run-ups made on a machine (its own and its jobs'), newest first."""
    stmt = _newest_first(select(RunUpRecord).where(RunUpRecord.machine_id == machine.id))
    return list(session.scalars(stmt.limit(limit)))


def recent_run_ups(session: Session, limit: int = 25) -> list[RunUpRecord]:
    """The shop's latest run-ups."""
    return list(session.scalars(_newest_first(select(RunUpRecord)).limit(limit)))

