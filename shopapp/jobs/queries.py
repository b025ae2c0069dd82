"""Read-only queries of the jobs pages: the job with what its page shows, its computed
state, the job list and its filters, the start-page panel, the choice lists of the
forms and what intake shows for a known serial.

Nothing here writes (docs/architecture.md, "Inside a feature package").
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields
from typing import Any

from sqlalchemy import Select, and_, func, or_, select
from sqlalchemy.orm import Session, joinedload, selectinload

from shopapp.core.checks import QUERY_AHEAD_DAYS, day_refusal, plain_digits
from shopapp.core.clock import shop_today
from shopapp.core.errors import NotFound
from shopapp.core.pagination import Page, paginate_ids
from shopapp.core.sqltime import utc_start
from shopapp.jobs import calc as job_calc
from shopapp.jobs import evidence
from shopapp.jobs.facts import REWORK_WINDOW_DAYS, reworked_within_window
from shopapp.models import (
    JOB_KINDS,
    JOB_STATES,
    AuditEvent,
    Correction,
    Customer,
    InfluenceSet,
    Job,
    JobFact,
    JobTransition,
    Machine,
    Rotor,
    RotorType,
    Run,
    User,
)
from shopapp.registry import rotors

# A rotor with a job in one of these states is still in the shop.
OPEN_STATES = ("booked_in", "on_machine", "in_tolerance", "certified")


# --------------------------------------------------------------------------- one job


def load_job(session: Session, job_id: int) -> Job:
    """A job with everything its page shows, in a fixed number of queries."""
    stmt = (
        select(Job)
        .where(Job.id == job_id)
        .options(
            joinedload(Job.customer),
            joinedload(Job.rotor).joinedload(Rotor.rotor_type),
            joinedload(Job.machine),
            joinedload(Job.operator),
            joinedload(Job.return_of),
            selectinload(Job.run_log).selectinload(Run.readings),
            selectinload(Job.run_log).joinedload(Run.struck_by),
            selectinload(Job.runs),
            selectinload(Job.corrections),
            selectinload(Job.correction_log).joinedload(Correction.struck_by),
            selectinload(Job.transitions),
        )
    )
    job = session.scalars(stmt).unique().first()
    if job is None:
        raise NotFound(f"no job with id {job_id}")
    return job


def influence_sets_for(session: Session, job: Job) -> list[InfluenceSet]:
    """Stored sets of the job's rotor type on the job's machine (any speed)."""
    if job.machine_id is None:
        return []
    stmt = select(InfluenceSet).where(
        InfluenceSet.rotor_type_id == job.rotor.rotor_type_id,
        InfluenceSet.machine_id == job.machine_id,
    ).order_by(InfluenceSet.learned_at.desc(), InfluenceSet.id.desc())
    return list(session.scalars(stmt))


def evaluate(session: Session, job: Job, *, drill_diameter_mm: float | None = None
             ) -> job_calc.JobCalc:
    """:func:`shopapp.jobs.calc.evaluate` with the job's stored sets loaded."""
    kw: dict[str, Any] = {}
    if drill_diameter_mm is not None:
        kw["drill_diameter_mm"] = drill_diameter_mm
    # A known arbor error the job subtracts (traceability); no query without an arbor.
    kw["arbor_error_gmm"] = evidence.arbor_error_gmm(session, job)
    return job_calc.evaluate(job, runs=job.runs, corrections=job.corrections,
                             influence_sets=influence_sets_for(session, job), **kw)


def job_audit_trail(session: Session, job_id: int) -> list[tuple[AuditEvent, str]]:
    """The job's audit events, oldest first, with who did it (one query)."""
    stmt = (
        select(AuditEvent, User.full_name)
        .outerjoin(User, User.id == AuditEvent.user_id)
        .where(AuditEvent.job_id == job_id)
        .order_by(AuditEvent.at, AuditEvent.id)
    )
    return [(ev, name or "system") for ev, name in session.execute(stmt)]


def return_jobs_of(session: Session, job_id: int) -> list[Job]:
    return list(session.scalars(
        select(Job).where(Job.return_of_job_id == job_id).order_by(Job.id)))


def open_job_of(session: Session, rotor_id: int) -> Job | None:
    """The rotor's job that is still in the shop, if any."""
    return session.scalars(select(Job).where(Job.rotor_id == rotor_id,
                                             Job.state.in_(OPEN_STATES)).limit(1)).first()


# --------------------------------------------------------------------------- intake


@dataclass(frozen=True)
class RotorHistory:
    """What intake shows for a known serial: the rotor, its job count, last job and residual."""

    rotor: Rotor
    jobs: int
    last_job: Job | None
    last_verdict: job_calc.RunVerdict | None
    open_job: Job | None


def rotor_history(session: Session, customer_id: int, serial_number: str) -> RotorHistory | None:
    """History of a known serial for the intake page, or None for an unknown serial."""
    serial = "".join(ch for ch in serial_number if ord(ch) >= 32)
    rotor = rotors.find_rotor(session, customer_id, serial)
    if rotor is None:
        return None
    count = session.scalar(select(func.count()).select_from(Job).where(Job.rotor_id == rotor.id))
    last_id = session.scalar(select(Job.id).where(Job.rotor_id == rotor.id)
                             .order_by(Job.received_on.desc(), Job.id.desc()).limit(1))
    last = load_job(session, last_id) if last_id is not None else None
    verdict = None
    if last is not None:
        verdict = evaluate(session, last).last_check
    return RotorHistory(rotor, count or 0, last, verdict, open_job_of(session, rotor.id))


@dataclass(frozen=True)
class IntakeChoices:
    """The choices of the intake form: live customers, rotor types and machines."""

    customers: Sequence[Any]
    rotor_types: Sequence[Any]
    machines: Sequence[Any]

    def rotor_types_of(self, customer_id: int | None) -> list[Any]:
        """The rotor types the intake form offers: the chosen customer's only (a rotor type
        is a customer's part number; a new customer has none yet)."""
        return [t for t in self.rotor_types if customer_id and t.customer_id == customer_id]

    def rotor_types_by_customer(self) -> dict[int, list[Any]]:
        """Every live customer's rotor types (the intake page's script narrows the list)."""
        out: dict[int, list[Any]] = {}
        for t in self.rotor_types:
            out.setdefault(t.customer_id, []).append(t)
        return out


def intake_choices(session: Session) -> IntakeChoices:
    """Customers, rotor types (with their customer's name) and machines not archived."""
    customers = session.execute(select(Customer.id, Customer.name)
                                .where(Customer.archived.is_(False))
                                .order_by(Customer.name)).all()
    types = session.execute(
        select(RotorType.id, RotorType.part_number, RotorType.description, Customer.name,
               RotorType.customer_id)
        .join(Customer, Customer.id == RotorType.customer_id)
        .where(RotorType.archived.is_(False), RotorType.one_off.is_(False))
        .order_by(Customer.name, RotorType.part_number)).all()
    machines = session.execute(select(Machine.id, Machine.name, Machine.min_mass_kg,
                                      Machine.max_mass_kg, Machine.max_speed_rpm)
                               .where(Machine.archived.is_(False))
                               .order_by(Machine.name)).all()
    return IntakeChoices(customers, types, machines)


# --------------------------------------------------------------------------- job list


@dataclass
class JobFilter:
    """Filters of the job list (query parameters of ``/jobs``; dashboard links use them).

    ``reworked``: ``"1"`` = reopened at least once or a return job; ``"0"`` = neither;
    ``"window"`` = reworked within :data:`~shopapp.jobs.facts.REWORK_WINDOW_DAYS` days of
    first reaching tolerance (the shop measures' rework: reopened, or come back as a
    return). ``reached_from``/``reached_to``: first reached tolerance on those days (UTC),
    the jobs the measures' first-pass and rework rates are counted over.
    ``rejected_from``/``rejected_to``: moved to rejected on those days (UTC), as the
    measures count rejections.
    ``q`` searches job number, serial number and customer name (case-insensitive).
    """

    operator_id: int | None = None
    machine_id: int | None = None
    rotor_type_id: int | None = None
    customer_id: int | None = None
    rotor_id: int | None = None
    state: str | None = None
    kind: str | None = None
    received_from: dt.date | None = None
    received_to: dt.date | None = None
    dispatched_from: dt.date | None = None
    dispatched_to: dt.date | None = None
    reached_from: dt.date | None = None
    reached_to: dt.date | None = None
    rejected_from: dt.date | None = None
    rejected_to: dt.date | None = None
    reworked: str | None = None
    q: str = ""

    @classmethod
    def from_args(cls, args: Mapping[str, Any]) -> tuple[JobFilter, list[str]]:
        """Parse query parameters; junk values are dropped with a message, never an error."""
        f = cls()
        messages: list[str] = []
        for fl in fields(cls):
            raw = args.get(fl.name)
            if raw is None or str(raw).strip() == "":
                continue
            # Control characters (NUL breaks PostgreSQL text) are never meaningful here.
            text = "".join(ch for ch in str(raw) if ord(ch) >= 32).strip()[:200]
            if not text:
                continue
            if fl.name.endswith("_id"):
                if plain_digits(text) and len(text) < 12:
                    setattr(f, fl.name, int(text))
                else:
                    messages.append(f"{fl.name}: {text[:20]!r} is not an id; ignored")
            elif fl.name in _DATE_FILTERS:
                try:
                    day = dt.date.fromisoformat(text)
                except ValueError:
                    messages.append(f"{fl.name}: {text[:20]!r} is not a date (YYYY-MM-DD); "
                                    "ignored")
                    continue
                refusal = day_refusal(day, ahead_days=QUERY_AHEAD_DAYS)
                if refusal is not None:
                    messages.append(f"{fl.name}: {refusal}; ignored")
                else:
                    setattr(f, fl.name, day)
            elif fl.name == "state":
                if text in JOB_STATES:
                    f.state = text
                else:
                    messages.append(f"state: {text[:20]!r} is not a job state; ignored")
            elif fl.name == "kind":
                if text in JOB_KINDS:
                    f.kind = text
                else:
                    messages.append(f"kind: {text[:20]!r} is not new or return; ignored")
            elif fl.name == "reworked":
                if text in REWORK_CHOICES:
                    f.reworked = text
                else:
                    messages.append(f"reworked: {text[:20]!r} is not one of "
                                    f"{', '.join(REWORK_CHOICES)}; ignored")
            elif fl.name == "q":
                f.q = text
        return f, messages

    def to_args(self) -> dict[str, str]:
        """The filter as query parameters (for pager and links)."""
        out: dict[str, str] = {}
        for fl in fields(self):
            v = getattr(self, fl.name)
            if v is None or v == "":
                continue
            if isinstance(v, bool):
                out[fl.name] = "1" if v else "0"
            elif isinstance(v, dt.date):
                out[fl.name] = v.isoformat()
            else:
                out[fl.name] = str(v)
        return out


_DATE_FILTERS = ("received_from", "received_to", "dispatched_from", "dispatched_to",
                 "reached_from", "reached_to", "rejected_from", "rejected_to")
#: The job list's rework filter: its values and what each shows.
REWORK_CHOICES: dict[str, str] = {
    "1": "reopened or return",
    "0": "neither",
    "window": f"reworked within {REWORK_WINDOW_DAYS} days of reaching tolerance",
}


def _like(text: str) -> str:
    esc = text.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")
    return f"%{esc}%"


# Up to this many matching rotors, a search passes their ids to the job query itself;
# beyond it (a search for "1" matches most serials) the rotor arm stays a subquery.
_ID_LIST_LIMIT = 500


@dataclass(frozen=True)
class TextMatches:
    """The customers and rotors a search text matches, found once for a page's two queries."""

    customer_ids: list[int]
    rotor_ids: list[int] | None  # None: too many to list; the job query matches by subquery


def _contains(column: Any, pat: str, dialect: str) -> Any:
    # SQLite's LIKE ignores ASCII case by itself and its lower() folds ASCII only, so the
    # plain LIKE matches exactly what ilike's lower(x) LIKE lower(y) would, at a third of
    # the cost over a large rotor table; PostgreSQL needs ILIKE.
    if dialect == "sqlite":
        return column.like(pat, escape="\\")
    return column.ilike(pat, escape="\\")


def text_matches(session: Session, text: str) -> TextMatches:
    """Resolve a search text against the small customer and rotor tables (two queries)."""
    dialect = session.get_bind().dialect.name
    pat = _like(text)
    customers = list(session.scalars(select(Customer.id)
                                     .where(_contains(Customer.name, pat, dialect))))
    rotors = list(session.scalars(select(Rotor.id)
                                  .where(_contains(Rotor.serial_number, pat, dialect))
                                  .limit(_ID_LIST_LIMIT + 1)))
    return TextMatches(customers, rotors if len(rotors) <= _ID_LIST_LIMIT else None)


def _conditions(f: JobFilter, matches: TextMatches | None = None) -> list[Any]:
    """The WHERE conditions of ``f`` on the job table.

    Searches and the rotor-type filter resolve against the small customer and rotor tables
    first — as id lists already found (``matches``, :func:`text_matches`) or as
    uncorrelated ``IN (SELECT id ...)`` — then index lookups in job, never a lookup per
    job. The job number is searched only when the text holds a digit: every job number
    holds its running number, so a text without digits can only match the pattern's fixed
    letters (``J-``), which every job shares.
    """
    conds: list[Any] = []
    for name in ("operator_id", "machine_id", "customer_id", "rotor_id", "state", "kind"):
        value = getattr(f, name)
        if value is not None:
            conds.append(getattr(Job, name) == value)
    if f.rotor_type_id is not None:
        conds.append(Job.rotor_id.in_(
            select(Rotor.id).where(Rotor.rotor_type_id == f.rotor_type_id)))
    if f.received_from is not None:
        conds.append(Job.received_on >= f.received_from)
    if f.received_to is not None:
        conds.append(Job.received_on <= f.received_to)
    if f.dispatched_from is not None:
        conds.append(Job.dispatched_on >= f.dispatched_from)
    if f.dispatched_to is not None:
        conds.append(Job.dispatched_on <= f.dispatched_to)
    if f.reworked == "1":
        conds.append(or_(Job.reopen_count > 0, Job.kind == "return"))
    elif f.reworked == "0":
        conds.append(and_(Job.reopen_count == 0, Job.kind == "new"))
    facts = []
    if f.reworked == "window":
        facts.append(reworked_within_window(shop_today()))
    if f.reached_from is not None:
        facts.append(JobFact.first_in_tolerance_at >= utc_start(f.reached_from))
    if f.reached_to is not None:
        facts.append(JobFact.first_in_tolerance_at
                     < utc_start(f.reached_to + dt.timedelta(days=1)))
    if facts:  # from the per-job facts (shopapp.jobs.facts), as the measures count them
        conds.append(Job.id.in_(select(JobFact.job_id).where(*facts)))
    moves = []
    if f.rejected_from is not None:
        moves.append(JobTransition.at >= utc_start(f.rejected_from))
    if f.rejected_to is not None:
        moves.append(JobTransition.at < utc_start(f.rejected_to + dt.timedelta(days=1)))
    if moves:
        conds.append(Job.id.in_(select(JobTransition.job_id)
                                .where(JobTransition.to_state == "rejected", *moves)))
    if f.q:
        pat = _like(f.q)
        by_serial = select(Rotor.id).where(Rotor.serial_number.ilike(pat, escape="\\"))
        by_name = select(Customer.id).where(Customer.name.ilike(pat, escape="\\"))
        if matches is not None:
            arms = [Job.customer_id.in_(matches.customer_ids),
                    Job.rotor_id.in_(by_serial if matches.rotor_ids is None
                                     else matches.rotor_ids)]
        else:
            arms = [Job.rotor_id.in_(by_serial), Job.customer_id.in_(by_name)]
        if any(ch.isdigit() for ch in f.q):
            arms.append(Job.number.ilike(pat, escape="\\"))
        conds.append(or_(*arms))
    return conds


# Newest received first; the index ix_job_received_id (received_on, id) serves this order.
_NEWEST_FIRST = (Job.received_on.desc(), Job.id.desc())


def filtered_jobs_stmt(f: JobFilter) -> Select[Any]:
    """Jobs matching ``f``, newest received first, with what the list shows eager-loaded."""
    return (_with_list_columns(select(Job)).where(*_conditions(f)).order_by(*_NEWEST_FIRST))


def _with_list_columns(stmt: Select[Any]) -> Select[Any]:
    return stmt.options(
        joinedload(Job.customer),
        joinedload(Job.rotor).joinedload(Rotor.rotor_type),
        joinedload(Job.machine),
        joinedload(Job.operator),
    )


def job_page(session: Session, f: JobFilter, *, page: int, per_page: int) -> Page[Job]:
    """One page of the job list: a search's customers and rotors first, the page's ids
    from the job table alone (index order, bounded count), then those jobs with what the
    list shows (three queries, five with a search)."""
    matches = text_matches(session, f.q) if f.q else None
    ids_stmt = select(Job.id).where(*_conditions(f, matches)).order_by(*_NEWEST_FIRST)

    def load(ids: list[int]) -> list[Job]:
        jobs = session.scalars(_with_list_columns(select(Job)).where(Job.id.in_(ids))).unique()
        by_id = {j.id: j for j in jobs}
        return [by_id[i] for i in ids]

    return paginate_ids(session, ids_stmt, load, page=page, per_page=per_page,
                        args=f.to_args())


def filter_choices(session: Session) -> dict[str, Sequence[Any]]:
    """The job list's filter choices: machines, operators, rotor types, customers (id, name)."""
    return {
        "machines": session.execute(select(Machine.id, Machine.name)
                                    .order_by(Machine.name)).all(),
        "operators": session.execute(select(User.id, User.full_name)
                                     .where(User.role.in_(("operator", "quality")))
                                     .order_by(User.full_name)).all(),
        "rotor_types": session.execute(select(RotorType.id, RotorType.part_number)
                                       .where(RotorType.one_off.is_(False))
                                       .order_by(RotorType.part_number)).all(),
        "customers": session.execute(select(Customer.id, Customer.name)
                                     .order_by(Customer.name)).all(),
    }


# --------------------------------------------------------------------------- start page


@dataclass(frozen=True)
class HomePanel:
    my_open: list[Job]
    waiting: list[Job]


def home_panel(session: Session, user: User, *, limit: int = 10) -> HomePanel:
    """Start-page panel: the user's open jobs and the jobs waiting to start (2 queries)."""
    base = select(Job).options(joinedload(Job.customer),
                               joinedload(Job.rotor).joinedload(Rotor.rotor_type),
                               joinedload(Job.machine))
    mine = session.scalars(base.where(Job.operator_id == user.id,
                                      Job.state.in_(("on_machine", "in_tolerance")))
                           .order_by(Job.received_on, Job.id).limit(limit)).unique().all()
    waiting = session.scalars(base.where(Job.state == "booked_in")
                              .order_by(Job.promised_on.is_(None), Job.promised_on,
                                        Job.received_on, Job.id).limit(limit)).unique().all()
    return HomePanel(list(mine), list(waiting))
