"""Per-job facts for the shop measures, kept in step with the job in the same transaction.

A :class:`~shopapp.models.JobFact` row holds what the measures count of one job (its
slice keys, days, turnaround, first time in tolerance, correction cycles, first-pass
verdict, rework dates and first initial reading), so a period's figures read one row
per job of the period instead of aggregating every job's runs on every request
(definitions: :mod:`shopapp.measures.services`; the SQL below computes them exactly as
those definitions say, with the same date arithmetic, :mod:`shopapp.core.sqltime`).
A :class:`~shopapp.models.RunFact` row holds one run's gap to the run before it in the
same segment of its job, whether it is rework and why (machine time,
:mod:`shopapp.measures.costs`), so a period's machine time reads the runs taken in it
and nothing else.

How the facts stay true:

- every flush of an ORM session that adds, changes or deletes a job, run, reading,
  correction or transition, or moves a rotor to another rotor type, refreshes the facts
  of the jobs concerned (and of the job a customer return names) before the flush ends,
  in the same transaction — so every jobs use-case, present or to come, keeps them
  without a call of its own;
- :func:`refresh_job_fact` does the same for given jobs, for code that writes those
  tables without the ORM (bulk inserts);
- :func:`rebuild` recomputes every row from scratch (``shopapp measures rebuild``, the
  bulk demo generator, migrations 0014 and 0023);
- within :func:`deferred` the flushes only note the jobs they touch, whose facts are
  written once at its end, in the same transaction (a batch that changes the same jobs
  flush after flush, where only their final rows count).

Imported past jobs (an ``imported_job`` row, :mod:`shopapp.imports`) get no row: the measures
count the shop's own work in shopapp, and such a job has only a final residual.
"""

from __future__ import annotations

import datetime as dt
import functools
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from typing import Any

from sqlalchemy import (
    Connection,
    Integer,
    Select,
    String,
    Table,
    and_,
    bindparam,
    case,
    delete,
    false,
    func,
    insert,
    literal_column,
    or_,
    select,
    true,
    union_all,
)
from sqlalchemy import event as sa_event
from sqlalchemy.orm import Session, aliased
from sqlalchemy.orm.attributes import get_history
from sqlalchemy.orm.base import PASSIVE_NO_INITIALIZE

from shopapp.core.sqltime import (
    day_number,
    epoch_seconds,
    int_div,
    utc_start,
    work_day_index_of_day,
    year_month,
)
from shopapp.jobs import calc as job_calc
from shopapp.models import (
    Correction,
    ImportedJob,
    Job,
    JobFact,
    JobTransition,
    Rotor,
    Run,
    RunFact,
    RunReading,
)

#: A job counts as reworked when it comes back to the machine within this many days of
#: first reaching tolerance (reopened, or returned by the customer). A fixed window keeps
#: the rework rate of an old period comparable with a recent one; a period's rate is
#: final once this many days have passed since its end.
REWORK_WINDOW_DAYS = 90


def reworked_within_window(today: dt.date) -> Any:
    """True (SQL, over job_fact) when the job was reworked within :data:`REWORK_WINDOW_DAYS`
    days of first reaching in_tolerance and by ``today``: reopened, or come back as a
    customer return. The shop measures count it; the job list filters by it.

    The facts keep the first reopening and the first return; a later one can only be later,
    so "the first one up to today is within the window" is "the first one is by today and
    within the window" (every reopening comes after the job first reached in_tolerance).
    """
    reached = JobFact.first_in_tolerance_at
    return or_(
        and_(JobFact.first_reopen_at < utc_start(today + dt.timedelta(days=1)),
             epoch_seconds(JobFact.first_reopen_at) - epoch_seconds(reached)
             <= REWORK_WINDOW_DAYS * 86400),
        and_(JobFact.first_return_on <= today,
             day_number(JobFact.first_return_on) - int_div(epoch_seconds(reached), 86400)
             <= REWORK_WINDOW_DAYS),
    )


# A move back to on_machine from one of these is a reopening (rework).
REWORK_FROM_STATES: tuple[str, ...] = ("in_tolerance", "certified", "dispatched")
_CHUNK = 500  # job ids per statement (SQLite allows 32 766 bound values; stay far below)

NO_REASON = "(no reason given)"
RETURN_REASON = "customer return"


def reopen_reason(reason: Any) -> Any:
    """How a reopening's reason is listed: its text trimmed, or "(no reason given)"."""
    trimmed = func.trim(reason)
    return case((trimmed == "", NO_REASON), else_=trimmed)


def return_reason(notes: Any) -> Any:
    """How a customer return is listed: "customer return", with the note written when it
    was booked in (its first 80 characters) when there is one."""
    trimmed = func.trim(notes)
    return case(
        (trimmed == "", RETURN_REASON),
        else_=literal_column(f"'{RETURN_REASON}: '", String) + func.substr(trimmed, 1, 80),
    )


@functools.cache  # built once: the flush hook calls it for every flush that touches a job
def facts_select(*, imported_table: bool = True) -> Select[Any]:
    """SELECT of every :class:`JobFact` column, one row per job (FROM job JOIN rotor).

    ``imported_table=False`` only for migration 0014, which fills the facts at a revision
    before ``imported_job`` exists (0022): no job can be an imported one there (nor a
    correction struck out, 0024).
    """
    reached = Job.first_in_tolerance_at
    before_tol = Correction.applied_at <= reached
    if imported_table:
        # A struck-out correction counts for nothing (revision 0024; 0014 predates it).
        before_tol = and_(before_tol, Correction.struck_at.is_(None))
    # Correction steps: distinct runs answered; a correction without a run stands alone.
    cycles = (
        select(func.count(func.distinct(func.coalesce(Correction.run_id, -Correction.id))))
        .where(Correction.job_id == Job.id, before_tol)
        .correlate(Job)
        .scalar_subquery()
    )
    answered = aliased(Run)
    first_step_seq = (
        select(func.min(answered.seq))
        .select_from(Correction)
        .join(answered, answered.id == Correction.run_id)
        .where(Correction.job_id == Job.id, before_tol)
        .correlate(Job)
        .scalar_subquery()
    )
    check = aliased(Run)
    first_pass = (
        select(case((check.within_tolerance == true(), 1),
                    (check.within_tolerance == false(), 0), else_=None))
        .where(check.job_id == Job.id, check.seq > first_step_seq,
               check.purpose.in_(job_calc.CHECK_PURPOSES),
               check.struck_at.is_(None))  # a struck-out run counts for nothing
        .order_by(check.seq)
        .limit(1)
        .correlate(Job)
        .scalar_subquery()
    )
    first_reopen = (
        select(func.min(JobTransition.at))
        .where(JobTransition.job_id == Job.id, JobTransition.to_state == "on_machine",
               JobTransition.from_state.in_(REWORK_FROM_STATES))
        .correlate(Job)
        .scalar_subquery()
    )
    rejected = (
        select(func.min(JobTransition.at))
        .where(JobTransition.job_id == Job.id, JobTransition.to_state == "rejected")
        .correlate(Job)
        .scalar_subquery()
    )
    later = aliased(Job)
    first_return = (
        select(func.min(later.received_on))
        .where(later.return_of_job_id == Job.id, later.kind == "return")
        .correlate(Job)
        .scalar_subquery()
    )
    # The first initial run (lowest seq, not struck out), found once per job by the outer
    # join below, and its readings (six figures: the run was looked up six times before).
    first_initial = (
        select(Run.id).where(Run.job_id == Job.id, Run.purpose == "initial",
                             Run.struck_at.is_(None))
        .order_by(Run.seq).limit(1).correlate(Job).scalar_subquery()
    )
    initial_run = aliased(Run, name="initial_run")

    def reading(agg: Any, plane: int | None = None) -> Any:
        where = [RunReading.run_id == initial_run.id]
        if plane is not None:
            where.append(RunReading.plane == plane)
        return select(agg).where(*where).correlate(initial_run).scalar_subquery()

    hit = case(
        (Job.dispatched_on.is_(None), None),
        (Job.promised_on.is_(None), None),
        (Job.dispatched_on <= Job.promised_on, 1),
        else_=0,
    )
    received_wdi = work_day_index_of_day(day_number(Job.received_on))
    turnaround = work_day_index_of_day(day_number(Job.dispatched_on)) - received_wdi
    columns: dict[str, Any] = {
        "job_id": Job.id,
        "operator_id": Job.operator_id,
        "machine_id": Job.machine_id,
        "rotor_type_id": Rotor.rotor_type_id,
        "customer_id": Job.customer_id,
        "rotor_id": Job.rotor_id,
        "kind": Job.kind,
        "received_on": Job.received_on,
        "received_month": year_month(Job.received_on),
        "received_wd_index": received_wdi,
        "dispatched_on": Job.dispatched_on,
        "dispatched_month": year_month(Job.dispatched_on),
        "turnaround_wd": turnaround,
        "promised_hit": hit,
        "rejected_at": rejected,
        "first_in_tolerance_at": reached,
        "tolerance_month": year_month(reached),
        "correction_cycles": cycles,
        "first_pass": first_pass,
        "first_reopen_at": first_reopen,
        "first_return_on": first_return,
        "initial_amplitude": reading(func.max(RunReading.amplitude)),
        "initial_amplitude_1": reading(func.max(RunReading.amplitude), 1),
        "initial_amplitude_2": reading(func.max(RunReading.amplitude), 2),
        "initial_unit": reading(func.min(RunReading.unit)),
        "initial_unit_max": reading(func.max(RunReading.unit)),
        "initial_units": reading(func.count(func.distinct(RunReading.unit))),
    }
    assert list(columns) == JobFact.__table__.c.keys(), "facts_select out of step with JobFact"
    # A past job imported from spreadsheets (Job.imported) has no facts row: it has no
    # runs, corrections or transitions of its own, so every measure (first pass, rework,
    # turnaround, work in progress, rotors getting worse) leaves it out by construction.
    stmt = (select(*(c.label(n) for n, c in columns.items()))
            .select_from(Job).join(Rotor, Rotor.id == Job.rotor_id)
            .outerjoin(initial_run, initial_run.id == first_initial))
    if not imported_table:
        return stmt
    return stmt.where(~select(ImportedJob.job_id).where(ImportedJob.job_id == Job.id)
                      .correlate(Job).exists())


@functools.cache  # built once per shape: the flush hook runs it on every run change
def run_facts_select(*, some_jobs: bool) -> Select[Any]:
    """SELECT of every :class:`RunFact` column, one row per run not struck out.

    ``some_jobs``: only the jobs of the expanding bind parameter ``job_ids``.

    The runs and reopenings (moves back to ``on_machine`` from a finished state) of a
    job in time order, a reopening before a run at the same moment; the running count
    of reopenings is the segment of a run (0: before any). The reopening that opened
    segment k is the job's k-th, so its reason is joined by that number (a second window
    over every run cost a fifth of a full rebuild). The gap of a run is its whole seconds
    since the run before it in its segment (LAG).
    """
    run_where: list[Any] = [Run.struck_at.is_(None)]
    reopen_where: list[Any] = [JobTransition.to_state == "on_machine",
                               JobTransition.from_state.in_(REWORK_FROM_STATES)]
    if some_jobs:
        run_where.append(Run.job_id.in_(bindparam("job_ids", expanding=True)))
        reopen_where.append(JobTransition.job_id.in_(bindparam("job_ids", expanding=True)))
    events = union_all(
        select(Run.job_id.label("job_id"), Run.taken_at.label("at"),
               literal_column("1", Integer).label("is_run"), Run.id.label("event_id"))
        .where(*run_where),
        select(JobTransition.job_id, JobTransition.at, literal_column("0", Integer),
               JobTransition.id).where(*reopen_where),
    ).subquery("events")
    e = events.c
    order = (e.at, e.is_run, e.event_id)
    segment = func.sum(1 - e.is_run).over(partition_by=e.job_id, order_by=order,
                                          rows=(None, 0))
    numbered = select(e.job_id, e.at, e.is_run, e.event_id,
                      segment.label("seg")).subquery("numbered")
    n = numbered.c
    # The k-th reopening in the events' order (time, then id) opened segment k.
    reopens = (select(JobTransition.job_id, JobTransition.reason,
                      func.row_number().over(partition_by=JobTransition.job_id,
                                             order_by=(JobTransition.at, JobTransition.id))
                      .label("k"))
               .where(*reopen_where).subquery("reopens"))
    runs = (select(n.job_id, n.at, n.event_id, n.seg, reopens.c.reason.label("seg_reason"),
                   epoch_seconds(n.at).label("t"))
            .select_from(numbered)
            .outerjoin(reopens, and_(reopens.c.job_id == n.job_id, reopens.c.k == n.seg))
            .where(n.is_run == 1).subquery("segment_runs"))
    previous_t = func.lag(runs.c.t).over(partition_by=(runs.c.job_id, runs.c.seg),
                                         order_by=(runs.c.t, runs.c.event_id))
    is_return = Job.kind == "return"
    columns: dict[str, Any] = {
        "run_id": runs.c.event_id,
        "job_id": runs.c.job_id,
        "taken_at": runs.c.at,
        "gap_s": runs.c.t - previous_t,
        "rework": case((or_(runs.c.seg > 0, is_return), 1), else_=0),
        "reason": case((runs.c.seg > 0, reopen_reason(runs.c.seg_reason)),
                       (is_return, return_reason(Job.notes)), else_=""),
    }
    assert list(columns) == RunFact.__table__.c.keys(), "run_facts_select out of step"
    return (select(*(c.label(k) for k, c in columns.items()))
            .select_from(runs).join(Job, Job.id == runs.c.job_id))


def _write(conn: Connection, job_ids: Iterable[int] | None, *,
           imported_table: bool = True, run_facts: bool = True) -> int:
    """Replace the facts of ``job_ids`` (every job when None), and their run facts unless
    ``run_facts`` is false; how many jobs were asked for (every job's count when None)."""
    target: Table = JobFact.__table__  # type: ignore[assignment]  # declared as FromClause
    runs_target: Table = RunFact.__table__  # type: ignore[assignment]
    names = list(target.c.keys())
    run_names = list(runs_target.c.keys())
    if job_ids is None:
        conn.execute(delete(target))
        conn.execute(insert(target).from_select(
            names, facts_select(imported_table=imported_table)))
        if run_facts:
            rebuild_run_facts(conn)
        # Counted, not rowcount: drivers need not report it for INSERT ... SELECT.
        return conn.scalar(select(func.count()).select_from(target)) or 0
    ids = sorted(set(job_ids))
    for i in range(0, len(ids), _CHUNK):
        chunk = ids[i:i + _CHUNK]
        conn.execute(delete(target).where(target.c.job_id.in_(chunk)))
        conn.execute(insert(target).from_select(names, facts_select().where(Job.id.in_(chunk))))
        if run_facts:
            conn.execute(delete(runs_target).where(runs_target.c.job_id.in_(chunk)))
            conn.execute(insert(runs_target).from_select(
                run_names, run_facts_select(some_jobs=True)), {"job_ids": chunk})
    return len(ids)


def refresh_job_fact(session: Session, job: Job | int) -> None:
    """Recompute one job's facts now, in the session's transaction (flushes first)."""
    session.flush()
    job_id = job if isinstance(job, int) else job.id
    _write(session.connection(), _with_returned(session.connection(), {job_id}))


def refresh_job_facts(session: Session, job_ids: Iterable[int]) -> None:
    """:func:`refresh_job_fact` for many jobs, in chunks (after bulk inserts)."""
    session.flush()
    conn = session.connection()
    _write(conn, _with_returned(conn, set(job_ids)))


def rebuild(session_or_conn: Session | Connection, *, imported_table: bool = True,
            run_facts: bool = True) -> int:
    """Recompute every job's facts and every run's from scratch; the number of jobs.

    ``imported_table=False``, ``run_facts=False``: migration 0014 only, at a revision
    before ``imported_job`` (:func:`facts_select`) and ``run_fact`` exist.
    """
    if isinstance(session_or_conn, Session):
        session_or_conn.flush()
        conn = session_or_conn.connection()
    else:
        conn = session_or_conn
    return _write(conn, None, imported_table=imported_table, run_facts=run_facts)


def rebuild_run_facts(conn: Connection) -> int:
    """Recompute every run's facts from scratch (migration 0023); the number of runs."""
    target: Table = RunFact.__table__  # type: ignore[assignment]  # declared as FromClause
    conn.execute(delete(target))
    conn.execute(insert(target).from_select(list(target.c.keys()),
                                            run_facts_select(some_jobs=False)))
    return conn.scalar(select(func.count()).select_from(target)) or 0


def _with_returned(conn: Connection, job_ids: set[int]) -> set[int]:
    """``job_ids`` and the jobs their customer returns name (a return is the earlier
    job's rework)."""
    out = set(job_ids)
    ids = sorted(job_ids)
    for i in range(0, len(ids), _CHUNK):
        out.update(conn.scalars(select(Job.return_of_job_id).where(
            Job.id.in_(ids[i:i + _CHUNK]), Job.return_of_job_id.is_not(None))))
    return out


# --------------------------------------------------------------------------- the flush hook

# ImportedJob: its row, added after the job's first flush, takes the job's facts away.
# Rotor: a job's rotor type is its rotor's, so moving a rotor to another type moves its jobs.
_WATCHED = (Job, Run, RunReading, Correction, JobTransition, ImportedJob, Rotor)


def _touched_jobs(session: Session) -> set[int]:
    """Jobs whose facts may have changed in the flush that just ran (ids; one query for
    readings whose run is not loaded, one for the jobs of a rotor moved to another type)."""
    job_ids: set[int] = set()
    run_ids: set[int] = set()
    rotor_ids: set[int] = set()
    for obj in (*session.new, *session.dirty, *session.deleted):
        if not isinstance(obj, _WATCHED):
            continue
        if isinstance(obj, Rotor):
            if obj.id is not None and any(
                    get_history(obj, name, passive=PASSIVE_NO_INITIALIZE).has_changes()
                    for name in ("rotor_type_id", "rotor_type")):
                rotor_ids.add(obj.id)
        elif isinstance(obj, Job):
            if obj.id is not None:
                job_ids.add(obj.id)
            # A return names an earlier job whose rework it is (also a name it no longer
            # holds, when the link was changed).
            h = get_history(obj, "return_of_job_id", passive=PASSIVE_NO_INITIALIZE)
            job_ids.update(i for i in (*(h.added or ()), *(h.unchanged or ()),
                                       *(h.deleted or ())) if i is not None)
        elif isinstance(obj, RunReading):
            if obj.run_id is not None:
                run_ids.add(obj.run_id)
        elif obj.job_id is not None:
            job_ids.add(obj.job_id)
    if run_ids:
        job_ids.update(session.connection().scalars(
            select(Run.job_id).where(Run.id.in_(sorted(run_ids)))))
    if rotor_ids:
        job_ids.update(session.connection().scalars(
            select(Job.id).where(Job.rotor_id.in_(sorted(rotor_ids)))))
    return job_ids


_DEFERRED = "shopapp.jobs.facts.deferred"  # session.info key: the jobs noted meanwhile


@contextmanager
def deferred(session: Session) -> Iterator[None]:
    """Flushes inside only note the jobs whose facts they would refresh; at the end (after a
    last flush) those jobs' facts are written once, in the session's transaction.

    For a batch that changes the same jobs again and again: the demo's certificate slices
    set each job's state back to what it was at the certificate's date and forward again
    around every issue (three or four flushes), so each job's facts were written several
    times for the one final state that counts. The facts are stale inside: nothing there
    may read them (the measures read them after the commit). On an error nothing is
    written; the caller rolls back. Nested, the outer one writes.
    """
    if _DEFERRED in session.info:
        yield
        return
    noted: set[int] = set()
    session.info[_DEFERRED] = noted
    try:
        yield
        session.flush()
    finally:
        del session.info[_DEFERRED]
    if noted:
        _write(session.connection(), noted)


@sa_event.listens_for(Session, "after_flush")
def _refresh_after_flush(session: Session, _flush_context: Any) -> None:
    job_ids = _touched_jobs(session)
    if not job_ids:
        return
    noted = session.info.get(_DEFERRED)
    if noted is not None:
        noted.update(job_ids)
        return
    _write(session.connection(), job_ids)

