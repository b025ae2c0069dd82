"""The demo shop: an invented balancing shop with about two years of consistent history.

:func:`load_demo` fills an empty database with the shop of
:mod:`shopapp.demo.scenario` (users, customers, rotor types, rotors,
machines with their verification register) and a history of jobs whose every
number comes from simulated physics:

- each rotor carries a hidden true unbalance ``U`` (grams at the correction
  radius, complex, per plane); the machine reads ``V = A_true · U + noise``
  with a linear plant ``A_true`` per rotor type, machine and serial (a
  hard-bearing machine's pedestal vibration from the rigid-rotor bearing
  forces, a soft-bearing machine's supercritical displacement ``U/M`` plus
  tilt, or a calibrated machine's g·mm with a small plane-separation error);
- readings are rounded like a machine display, and every correction is
  computed from the *stored* readings by the balancing core
  (:mod:`shopapp.balancing.influence`: coefficients from two trial runs, a
  stored set of the rotor type, or a calibrated machine), exactly as
  :mod:`shopapp.jobs.calc` would compute it from the same rows;
- the operator fits the advice rounded to the weights in stock, split onto
  blades or holes, or drilled, with a hidden fitting error, so some jobs need
  several correction cycles; every check run is judged by
  :func:`shopapp.balancing.tolerance.judge_residual` against the job's
  tolerance (:func:`shopapp.jobs.calc.job_tolerance`), and a job
  reaches ``in_tolerance`` only when that verdict passes.

Around the physics: working-day dates (received, promised, dispatched),
reopened jobs with reasons, customer returns linked to the earlier job,
rejections with reasons, jobs still in progress at the end date, one machine
due for verification soon and one that was overdue for a while (its jobs of
that period were checked again after re-verification), learned influence
sets (a new one per learning job; a job judged with a stored set records it),
a JobTransition row for every state change, AuditEvent rows for every action,
and certificates (some reissued, some void).

Traceability (issue 6) goes through the services, after the bulk rows, in the
order it happened and dated then (:func:`_replay`): proving rotors and
proving tests (:func:`shopapp.traceability.services.record_proving_test`), a
shop arbor with a slowly drifting error history from index runs, the jobs
balanced on it (which subtract its latest measured error, and whose
simulated readings carry the true error), key conventions on two rotor
types, residual-unbalance tests of the jobs that require one (4W/N and the
customer who asks), made before certifying, and every certificate through
:func:`shopapp.certificates.issue.issue` / ``reissue`` / ``void`` with
their historical times.

:func:`generate_bulk` builds a much larger history (e.g. 100 000 jobs and
1 000 000 runs) for benchmarks with the same model, closed-form 2×2 algebra
instead of the core's validated per-call functions, and no certificates.
Rows are written with SQLAlchemy Core bulk inserts in chunks.

Nothing here is a real shop, company or person (see ``demo_scenario``).
"""

from __future__ import annotations

import bisect
import cmath
import datetime as dt
import heapq
import json
import math
import operator
import random
import secrets
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from sqlalchemy import JSON, Boolean, Date, DateTime, bindparam, func, insert, select, text, update
from sqlalchemy.orm import Session

from shopapp.accounts.users import hash_password
from shopapp.balancing import influence, positions, removal, tolerance
from shopapp.balancing.phasors import amplitude_angle, normalize_deg, phasor
from shopapp.balancing.planes import transfer_matrix
from shopapp.core.errors import ServiceError, ValidationFailed
from shopapp.core.numbering import DEFAULT_PATTERN, format_number, per_year
from shopapp.core.settings import get_settings
from shopapp.demo import scenario as sc
from shopapp.jobs import calc as job_calc
from shopapp.jobs import evidence as jt
from shopapp.jobs.advice import prediction_error_pct
from shopapp.jobs.residual_tests import (
    SUGGESTED_FACTOR,
    ResidualOutcome,
    evaluate_residual_test,
    record_residual_test,
)
from shopapp.models import (
    AuditEvent,
    Certificate,
    Correction,
    Customer,
    InfluenceSet,
    Job,
    JobTransition,
    Machine,
    MachineVerification,
    Rotor,
    RotorType,
    Run,
    RunReading,
    ShopSettings,
    User,
)
from shopapp.models.base import UTCDateTime
from shopapp.traceability import services as tr

Progress = Callable[[str], object]
Steps = Callable[[int, int], object]
Login = tuple[str, str, str]

DEFAULT_JOBS_PER_YEAR = 320
MAX_CYCLES = 10  # a job that is still out after this many corrections is given up
CHUNK = 5000
RETURN_RATE = 0.05  # share of dispatched jobs that come back as a customer return
STORED_SET_USE = 0.6  # chance an operator corrects from a stored set when one exists
WORKDAY_START_MIN = 7 * 60 + 30  # 07:30 UTC
# Tables the generator writes with explicit ids (their sequences are moved on for PostgreSQL).
_ID_TABLES = (User, Customer, RotorType, Rotor, Machine, MachineVerification, Job,
              JobTransition, Run, RunReading, Correction, InfluenceSet, AuditEvent, Certificate)


class DemoRefused(ServiceError):
    """The demo shop was not loaded (the database already holds a shop)."""


# --------------------------------------------------------------------------- dates


def is_working_day(day: dt.date) -> bool:
    """Mondays to Fridays, except the shop's year-end closure (24 Dec – 1 Jan)."""
    if day.weekday() >= 5:
        return False
    return not ((day.month == 12 and day.day >= 24) or (day.month == 1 and day.day == 1))


def add_working_days(day: dt.date, n: int) -> dt.date:
    """The ``n``-th working day after ``day`` (``n = 0``: ``day`` or the next working day)."""
    out = day
    while not is_working_day(out):
        out += dt.timedelta(days=1)
    for _ in range(n):
        out += dt.timedelta(days=1)
        while not is_working_day(out):
            out += dt.timedelta(days=1)
    return out


def _at(day: dt.date, minutes: float) -> dt.datetime:
    """A whole-second UTC moment ``minutes`` after midnight of ``day``."""
    return dt.datetime(day.year, day.month, day.day, tzinfo=dt.UTC) + dt.timedelta(
        seconds=round(minutes * 60.0)
    )


# --------------------------------------------------------------------------- the solver


Matrix = tuple[complex, complex, complex, complex]  # row-major 2×2: a11, a12, a21, a22
Pair = tuple[complex, complex]


def _rect(amplitude: float, angle_deg: float) -> complex:
    # The same float operations as shopapp.balancing.phasors.phasor (which job_calc uses).
    return cmath.rect(amplitude, math.radians(angle_deg))


@dataclass(frozen=True)
class _Limits:
    """The job tolerance as the fast judge needs it."""

    reference: str
    limits: tuple[float, float]
    transfer: tuple[float, float, float, float] | None  # correction → bearing planes


class _Solver:
    """The balancing computations the generator needs.

    ``exact=True`` calls the balancing core for every step (what the demo
    uses, so stored advice is the core's answer); ``exact=False`` uses the
    same formulas in closed form for speed (bulk mode). Both take the
    *stored* (rounded) readings.
    """

    def __init__(self, exact: bool) -> None:
        self.exact = exact

    def coefficients(self, v0: Pair, trials: Sequence[tuple[int, float, float, Pair]]
                     ) -> tuple[Matrix, float]:
        """``A[:, j] = (V_j − V0) / T_j`` (trial masses removed before the next run)."""
        if self.exact:
            ic = influence.influence_coefficients(
                list(v0), [influence.TrialRun(p, m, a, tuple(v)) for p, m, a, v in trials]
            )
            a = ic.matrix()
            return (complex(a[0, 0]), complex(a[0, 1]), complex(a[1, 0]), complex(a[1, 1])), (
                ic.condition_number)
        cols: dict[int, Pair] = {}
        for plane, mass, angle, v in trials:
            t = _rect(mass, angle)
            cols[plane] = ((v[0] - v0[0]) / t, (v[1] - v0[1]) / t)
        a = (cols[1][0], cols[2][0], cols[1][1], cols[2][1])
        return a, _condition_2x2(a)

    def correction(self, a: Matrix, v: Pair) -> Pair:
        """``W = −A⁻¹ · V`` in grams at the correction radius."""
        if self.exact:
            sol = influence.correction_from_coefficients(
                np.array([[a[0], a[1]], [a[2], a[3]]]), list(v)
            )
            return sol.corrections[0].vector_g, sol.corrections[1].vector_g
        det = a[0] * a[3] - a[1] * a[2]
        return (-(a[3] * v[0] - a[1] * v[1]) / det, -(a[0] * v[1] - a[2] * v[0]) / det)

    def unbalance_gmm(self, a: Matrix | None, v: Pair, radii: tuple[float, float]) -> Pair:
        """The unbalance a run shows: g·mm readings as they are, else ``A⁻¹·V·R``."""
        if a is None:
            return v
        if self.exact:
            u = np.linalg.lstsq(np.array([[a[0], a[1]], [a[2], a[3]]]), np.array(v), rcond=None)[0]
            return complex(u[0]) * radii[0], complex(u[1]) * radii[1]
        det = a[0] * a[3] - a[1] * a[2]
        u1 = (a[3] * v[0] - a[1] * v[1]) / det
        u2 = (a[0] * v[1] - a[2] * v[0]) / det
        return u1 * radii[0], u2 * radii[1]

    def passed(self, tm: _TypeModel, u: Pair) -> bool:
        """The verdict of :func:`shopapp.balancing.tolerance.judge_residual`."""
        if self.exact:
            core = tm.tolerance.core
            assert core is not None
            return tolerance.judge_residual(u[0], u[1], core, tm.tolerance.geometry).passed
        lim = tm.limits
        if lim.transfer is not None:
            t = lim.transfer
            r = (t[0] * u[0] + t[1] * u[1], t[2] * u[0] + t[3] * u[1])
        else:
            r = u
        return abs(r[0]) <= lim.limits[0] and abs(r[1]) <= lim.limits[1]


def _condition_2x2(a: Matrix) -> float:
    """2-norm condition number of a 2×2 matrix from ‖A‖_F² and |det| (closed form)."""
    frob = sum(abs(x) ** 2 for x in a)
    d = abs(a[0] * a[3] - a[1] * a[2])
    return (frob + math.sqrt(max(frob * frob - 4.0 * d * d, 0.0))) / (2.0 * d)


# --------------------------------------------------------------------------- the shop model


@dataclass
class _MachineModel:
    spec: sc.MachineSpec
    id: int
    lapse: tuple[dt.date, dt.date] | None = None  # (overdue from, re-verified on)
    phase_deg: tuple[float, float] = (0.0, 0.0)


@dataclass
class _TypeModel:
    spec: sc.RotorTypeSpec
    id: int
    customer_id: int
    machine: _MachineModel
    row: RotorType
    tolerance: job_calc.JobTolerance
    limits: _Limits
    radii: tuple[float, float]
    a_nominal: Matrix
    noise_abs: float
    decimals: int
    trial_g: tuple[float, float]
    tol_columns: dict[str, Any]
    fleet: list[_RotorModel] = field(default_factory=list)
    fleet_target: int = 0
    serial_width: int = 4

    @property
    def calibrated(self) -> bool:
        return self.machine.spec.reading_unit == "g·mm"


@dataclass
class _RotorModel:
    type: _TypeModel
    id: int
    serial: str
    a_true: Matrix
    growth: float
    visits: int = 0
    free_from: dt.date = dt.date.min
    reserved: bool = False


@dataclass
class _Plan:
    """One job's dates and fate, decided before its physics."""

    idx: int
    rotor: _RotorModel
    kind: str
    parent: _Plan | None
    received: dt.date
    booked_at: dt.datetime
    promised: dt.date
    operator: int
    notes: str
    order_ref: str
    fate: str = "normal"  # normal | reject_booked | reject_machine
    reject_reason: str = ""
    reject_day: dt.date | None = None
    start_at: dt.datetime | None = None
    two_day: bool = False
    certify_day: dt.date | None = None
    dispatch_day: dt.date | None = None
    reopen: str = ""  # "" | disturbed_tol | disturbed_cert | disturbed_disp | overdue
    reopen_day: dt.date | None = None
    certify2_day: dt.date | None = None
    dispatch2_day: dt.date | None = None
    final_runs: int = 0
    reissue_day: dt.date | None = None
    final_day: dt.date | None = None  # when the rotor leaves (dispatch or rejection)
    job_id: int = 0
    number: str = ""
    result_state: str = ""
    result_dispatched: bool = False


@dataclass
class _Event:
    at: dt.datetime
    kind: str  # tr | run | corr | learn | score | cert
    data: dict[str, Any]


@dataclass
class _Rows:
    """Rows collected for bulk insertion, in foreign-key order."""

    jobs: list[dict[str, Any]] = field(default_factory=list)
    transitions: list[dict[str, Any]] = field(default_factory=list)
    runs: list[dict[str, Any]] = field(default_factory=list)
    readings: list[dict[str, Any]] = field(default_factory=list)
    corrections: list[dict[str, Any]] = field(default_factory=list)
    sets: list[dict[str, Any]] = field(default_factory=list)
    audits: list[dict[str, Any]] = field(default_factory=list)


class _Ids:
    """Explicit primary keys, continuing after what the database already holds."""

    def __init__(self, session: Session) -> None:
        self._next: dict[str, int] = {}
        for model in _ID_TABLES:
            top = session.scalar(select(func.max(model.id))) or 0
            self._next[model.__tablename__] = top + 1

    def take(self, model: type[Any]) -> int:
        name = model.__tablename__
        value = self._next[name]
        self._next[name] = value + 1
        return value


@dataclass
class DemoSummary:
    """What :func:`generate_bulk` (and :func:`load_demo`) wrote."""

    logins: list[Login]
    jobs: int
    runs: int
    readings: int
    corrections: int
    transitions: int
    audit_events: int
    certificates: int
    influence_sets: int
    seconds: float
    by_state: dict[str, int]


# --------------------------------------------------------------------------- public API


def load_demo(
    session: Session,
    *,
    seed: int = 1,
    years: float = 2.0,
    progress: Progress | None = None,
    end_date: dt.date | None = None,
    jobs_per_year: int | None = None,
    force: bool = False,
    steps: Steps | None = None,
    certificates: bool = True,
) -> list[Login]:
    """Load the demo shop and return its logins ``(role, username, password)``.

    Parameters
    ----------
    session : Session
        Rows are added and flushed; the caller commits (the CLI does once).
    seed : int
        Same seed, same shop, same history (passwords are random each time).
    years : float
        Length of the history, ending at ``end_date``; 0 < years <= 10.
    progress : callable(str), optional
        Receives a few phase messages ("demo: 640 jobs simulated", …).
    end_date : date, optional
        Last day of the history (default today): jobs still open then stay open.
    jobs_per_year : int, optional
        New jobs per year (default 320, so two years give 600+ jobs with returns).
    force : bool
        Load even when the database already has customers or jobs: the demo
        shop is *added* beside them under distinct names ("… [demo 2]");
        nothing existing is changed or deleted.
    steps : callable(done, total), optional
        Called as the jobs are simulated and written, for a progress bar.
    certificates : bool
        Issue the certificates of certified and dispatched jobs (PDFs; the
        slowest part).

    Raises
    ------
    DemoRefused
        The database holds customers or jobs and ``force`` is not set.
    """
    summary = _generate(
        session, seed=seed, years=years, end_date=end_date,
        jobs_per_year=jobs_per_year if jobs_per_year is not None else DEFAULT_JOBS_PER_YEAR,
        total_jobs=None, runs_per_job=None, force=force, progress=progress, steps=steps,
        exact=True, with_certificates=certificates,
    )
    return summary.logins


def generate_bulk(
    session: Session,
    *,
    jobs: int,
    runs_per_job: int = 10,
    seed: int = 1,
    years: float = 2.0,
    end_date: dt.date | None = None,
    force: bool = False,
    progress: Progress | None = None,
    steps: Steps | None = None,
) -> DemoSummary:
    """A large demo history for benchmarks: about ``jobs`` jobs and ``jobs·runs_per_job`` runs.

    Same shop and physics as :func:`load_demo`, but corrections and verdicts
    use the closed-form 2×2 solution (the formulas of
    :func:`shopapp.balancing.influence.solve_two_plane_batch` and
    :func:`shopapp.balancing.tolerance.judge_residuals_batch`) instead of one
    validated core call per step, jobs repeat their final run until they
    have ``runs_per_job`` runs (a repeatability record, as a shop keeps for
    the balance-error estimate), fleets grow with the job count, and no
    certificates, residual-unbalance tests or arbor jobs are made (the
    machines' proving tests are). About 100 000 jobs / 1 000 000 runs take a few
    minutes on SQLite.
    """
    if jobs < 1:
        raise ValidationFailed("jobs", f"must be at least 1, got {jobs}")
    if runs_per_job < 4:
        raise ValidationFailed(
            "runs_per_job", f"must be at least 4 (initial, two trials, a check), got {runs_per_job}"
        )
    return _generate(
        session, seed=seed, years=years, end_date=end_date, jobs_per_year=None,
        total_jobs=jobs, runs_per_job=runs_per_job, force=force, progress=progress,
        steps=steps, exact=False, with_certificates=False,
    )


# --------------------------------------------------------------------------- the run


def _generate(
    session: Session,
    *,
    seed: int,
    years: float,
    end_date: dt.date | None,
    jobs_per_year: int | None,
    total_jobs: int | None,
    runs_per_job: int | None,
    force: bool,
    progress: Progress | None,
    steps: Steps | None,
    exact: bool,
    with_certificates: bool,
) -> DemoSummary:
    import time

    t0 = time.perf_counter()
    if not (0 < years <= 10):
        raise ValidationFailed("years", f"must be more than 0 and at most 10, got {years:g}")
    say = progress or (lambda _msg: None)
    tag = _demo_tag(session, force)
    end = end_date or dt.date.today()
    start = end - dt.timedelta(days=round(365.25 * years))
    if total_jobs is not None:
        n_new = max(1, round(total_jobs / (1.0 + RETURN_RATE)))
    else:
        n_new = max(1, round((jobs_per_year or DEFAULT_JOBS_PER_YEAR) * years))
    gen = _Generator(session, rng=random.Random(seed), start=start, end=end, tag=tag,
                     solver=_Solver(exact), runs_per_job=runs_per_job,
                     fleet_scale=max(1.0, n_new / 640.0), with_certificates=with_certificates)
    say(f"demo: setting up {gen.shop_name} ({start.isoformat()} to {end.isoformat()})")
    logins = gen.setup()
    say(f"demo: planning about {n_new} jobs")
    plans = gen.plan(n_new)
    say(f"demo: simulating {len(plans)} jobs on the balancing machines")
    gen.simulate(plans, steps)
    say("demo: writing rows")
    gen.write(steps)
    say("demo: traceability records" + (f" and certificates for {len(gen.cert_jobs)} jobs"
                                        if with_certificates else ""))
    n_certs = _replay(session, gen, steps)
    session.flush()
    by_state: dict[str, int] = {}
    for row in gen.rows_done["jobs"]:
        by_state[row] = by_state.get(row, 0) + 1
    summary = DemoSummary(
        logins=logins, jobs=gen.counts["jobs"], runs=gen.counts["runs"],
        readings=gen.counts["readings"], corrections=gen.counts["corrections"],
        transitions=gen.counts["transitions"], audit_events=gen.counts["audits"],
        certificates=n_certs, influence_sets=gen.counts["sets"],
        seconds=time.perf_counter() - t0, by_state=by_state,
    )
    say(f"demo: {summary.jobs} jobs, {summary.runs} runs, {n_certs} certificates "
        f"in {summary.seconds:.0f} s")
    return summary


def _demo_tag(session: Session, force: bool) -> str:
    """"" for an empty shop; with ``force`` a suffix no earlier demo used ("[demo 2]" …)."""
    has_customers = session.scalar(select(func.count()).select_from(Customer)) or 0
    has_jobs = session.scalar(select(func.count()).select_from(Job)) or 0
    if not (has_customers or has_jobs):
        return ""
    if not force:
        raise DemoRefused(
            f"the database already holds {has_customers} customer(s) and {has_jobs} job(s); "
            "the demo shop loads only into an empty shop (use --force to add it beside the "
            "existing data under distinct names; nothing is deleted)"
        )
    n = 2
    while True:
        tag = f" [demo {n}]"
        taken = session.scalar(
            select(func.count()).select_from(Machine).where(Machine.name.like(f"%{tag}"))
        )
        if not taken:
            return tag
        n += 1


# --------------------------------------------------------------------------- generator


class _Generator:
    def __init__(self, session: Session, *, rng: random.Random, start: dt.date, end: dt.date,
                 tag: str, solver: _Solver, runs_per_job: int | None, fleet_scale: float,
                 with_certificates: bool = False) -> None:
        self.session = session
        self.rng = rng
        self.start = start
        self.end = end
        self.end_at = _at(end, 24 * 60 - 1)
        self.tag = tag
        self.solver = solver
        self.exact = solver.exact
        self.runs_per_job = runs_per_job
        self.fleet_scale = fleet_scale
        self.ids = _Ids(session)
        # Bulk mode on SQLite skips SQLAlchemy's per-value processing (a third of the time).
        self.raw_sqlite = not solver.exact and session.get_bind().dialect.name == "sqlite"
        self.admin_id = 0
        self.rows = _Rows()
        self.counts = {"jobs": 0, "runs": 0, "readings": 0, "corrections": 0,
                       "transitions": 0, "audits": 0, "sets": 0}
        self.rows_done: dict[str, list[str]] = {"jobs": []}
        self.users: list[int] = []  # ids in sc.PEOPLE order
        self.quality_id = 0
        self.machines: dict[str, _MachineModel] = {}
        self.types: list[_TypeModel] = []
        self.rotor_rows: list[dict[str, Any]] = []
        self.sets: dict[tuple[int, int, float], list[dict[str, Any]]] = {}
        self.set_scores: dict[int, tuple[dt.datetime, float]] = {}
        self.cert_jobs: set[int] = set()
        # The certificates service writes the "certified" transitions when it issues.
        self.with_certificates = with_certificates
        # Traceability and certificates, written through the services after the rows:
        # (at, order, job_id, kind, data), kind "arbor" | "rtest" | "cert".
        self.ops: list[tuple[dt.datetime, int, int, str, dict[str, Any]]] = []
        self.timeline: dict[int, list[tuple[dt.datetime, str]]] = {}
        self.final: dict[int, tuple[str, dt.datetime]] = {}
        self.job_sets: list[dict[str, int]] = []
        self.verification_dates: dict[str, list[dt.date]] = {}
        # (measured_on, first run, second run, measured error per plane)
        self.arbor_plan: list[tuple[dt.date, list[tuple[float, float]],
                                    list[tuple[float, float]], Pair]] = []
        self.arbor_rows: list[Any] = []
        self.arbor_row: Any = None
        self.rtest_jobs = 0
        # A stream of its own, so the register does not shift the jobs' physics.
        self.register_rng = random.Random(rng.random())
        self.shop_name = sc.SHOP_NAME + self.tag
        self.pattern = DEFAULT_PATTERN if not tag else (
            "D" + tag.strip(" []").split()[-1] + "-{year}-{seq:05d}")

    # ------------------------------------------------------------------ helpers

    def _audit(self, at: dt.datetime, by: int | None, entity: str, entity_id: int | None,
               action: str, after: dict[str, Any] | None = None,
               before: dict[str, Any] | None = None, job_id: int | None = None) -> None:
        self.rows.audits.append({
            "id": self.ids.take(AuditEvent), "at": at, "user_id": by, "entity": entity,
            "entity_id": entity_id, "action": action, "before": before, "after": after,
            "job_id": job_id,
        })

    def _insert(self, model: type[Any], rows: list[dict[str, Any]]) -> None:
        """Core bulk INSERT in chunks; in bulk mode on SQLite straight to the driver."""
        if not rows:
            return
        table = model.__table__
        if self.raw_sqlite:
            _insert_sqlite(self.session, table, rows)
            return
        for i in range(0, len(rows), CHUNK):
            self.session.execute(insert(table), rows[i:i + CHUNK])

    # ------------------------------------------------------------------ shop set-up

    def setup(self) -> list[Login]:
        s = self.session
        rng = self.rng
        t_setup = _at(self.start - dt.timedelta(days=30), 9 * 60)
        self._settings()
        logins: list[Login] = []
        user_rows = []
        taken = set(s.scalars(select(User.username)))
        for person in sc.PEOPLE:
            name = person.username
            k = 2
            while name in taken:
                name = f"{person.username}{k}"
                k += 1
            taken.add(name)
            password = secrets.token_urlsafe(9)
            uid = self.ids.take(User)
            user_rows.append({
                "id": uid, "username": name, "full_name": person.full_name + self.tag,
                "role": person.role, "password_hash": hash_password(password), "active": True,
                "created_at": t_setup,
            })
            self.users.append(uid)
            logins.append((person.role, name, password))
            self._audit(t_setup, None, "user", uid, "create",
                        after={"username": name, "role": person.role})
        self.quality_id = self.users[[p.role for p in sc.PEOPLE].index("quality")]
        self.admin_id = self.users[[p.role for p in sc.PEOPLE].index("admin")]
        self._insert(User, user_rows)

        customer_ids: dict[str, int] = {}
        rows = []
        for c in sc.CUSTOMERS:
            cid = self.ids.take(Customer)
            customer_ids[c.key] = cid
            rows.append({"id": cid, "name": c.name + self.tag, "contact": c.contact,
                         "email": c.email, "phone": c.phone, "address": c.address,
                         "notes": c.notes, "requires_residual_test": c.requires_residual_test,
                         "archived": False, "created_at": t_setup})
            self._audit(t_setup, self.admin_id, "customer", cid, "create",
                        after={"name": c.name + self.tag})
        self._insert(Customer, rows)
        self.requires_test = {customer_ids[c.key]: c.requires_residual_test
                              for c in sc.CUSTOMERS}

        rows = []
        for m in sc.MACHINES:
            mid = self.ids.take(Machine)
            self.machines[m.key] = _MachineModel(
                m, mid, phase_deg=(rng.uniform(-40, 40), rng.uniform(-40, 40)))
            rows.append({"id": mid, "name": m.name + self.tag, "bearing_kind": m.bearing_kind,
                         "min_mass_kg": m.min_mass_kg, "max_mass_kg": m.max_mass_kg,
                         "min_speed_rpm": m.min_speed_rpm, "max_speed_rpm": m.max_speed_rpm,
                         "claimed_emar_gmm_per_kg": m.claimed_emar_gmm_per_kg,
                         "claimed_urr_pct": m.claimed_urr_pct,
                         "suspension_resonance_rpm": m.suspension_resonance_rpm,
                         "verification_interval_days": m.verification_interval_days,
                         "notes": m.notes, "archived": False, "created_at": t_setup})
            self._audit(t_setup, self.admin_id, "machine", mid, "create",
                        after={"name": m.name + self.tag})
        self._insert(Machine, rows)
        self._verifications()
        self._arbor_plan()

        rows = []
        for spec in sc.ROTOR_TYPES:
            tm = self._type_model(spec, customer_ids[spec.customer])
            self.types.append(tm)
            cols = {c.key: getattr(tm.row, c.key) for c in RotorType.__table__.columns
                    if c.key not in ("id", "created_at")}
            rows.append({"id": tm.id, **cols, "created_at": t_setup})
            self._audit(t_setup, self.users[0], "rotor_type", tm.id, "create",
                        after={"part_number": spec.part_number})
        self._insert(RotorType, rows)
        s.flush()
        return logins

    def _settings(self) -> None:
        """Name the shop in an empty database; beside an existing shop, change nothing."""
        if self.tag:
            return
        s = self.session
        row = s.get(ShopSettings, 1)
        if row is None:
            s.add(ShopSettings(id=1, shop_name=self.shop_name, shop_address=sc.SHOP_ADDRESS,
                               job_number_pattern=DEFAULT_PATTERN))
            s.flush()
        elif not self.tag:
            # An empty shop whose admin saved settings already: keep them, use its pattern.
            self.pattern = row.job_number_pattern
            self.shop_name = row.shop_name

    def _verifications(self) -> None:
        """Proving-rotor test dates through the period, shaped by each machine's ``history``."""
        span = (self.end - self.start).days
        for mm in self.machines.values():
            m = mm.spec
            interval = m.verification_interval_days
            if m.history == "due_soon":
                anchor = self.end - dt.timedelta(days=interval - 9)
                dates = _series_back(anchor, interval, self.start)
            elif m.history == "lapsed":
                planned = self.start + dt.timedelta(days=int(0.45 * span))
                dates = _series_back(planned - dt.timedelta(days=interval), interval, self.start)
                # The last test before the lapse decides when it fell due (working-day shift).
                due = max(dates) + dt.timedelta(days=interval)
                after = add_working_days(due + dt.timedelta(days=25), 0)
                d = after
                while d <= self.end:
                    dates.append(d)
                    d = add_working_days(d + dt.timedelta(days=interval - 3), 0)
                mm.lapse = (due, after)
            else:
                anchor = self.end - dt.timedelta(days=interval // 2)
                dates = _series_back(anchor, interval, self.start)
            # Recorded through the traceability service after the rows (_register).
            self.verification_dates[m.key] = sorted(set(dates))

    def _arbor_plan(self) -> None:
        """The arbor's index runs over the period and the error each gives (exact mode only).

        Its true error drifts linearly (demo_scenario); each measurement mounts a
        reference impeller, runs, turns it 180° on the arbor, runs again
        (calibrated g·mm readings, rounded like the display), and separates the
        two with :func:`shopapp.traceability.services.separate_index_runs`, as
        :func:`~shopapp.traceability.services.record_arbor_error` will.
        """
        if not self.exact or not any(spec.part_number == sc.ARBOR_ROTOR_TYPE
                                     for spec in sc.ROTOR_TYPES):
            return
        rng = self.register_rng
        d = self.start - dt.timedelta(days=20)
        while d <= self.end:
            day = add_working_days(d, 0)
            if day <= self.end:
                true = self.arbor_true_error(day)
                u_r = [_rect(rng.uniform(40.0, 120.0), rng.uniform(0, 360)) for _ in range(2)]
                runs = []
                for sign in (1.0, -1.0):  # the rotor turned 180° on the arbor: −U_r
                    run = []
                    for i in (0, 1):
                        z = sign * u_r[i] + true[i] + complex(rng.gauss(0, 0.3),
                                                              rng.gauss(0, 0.3))
                        a, g = amplitude_angle(z)
                        run.append((round(a, 1), float(round(g) % 360)))
                    runs.append(run)
                sep = tr.separate_index_runs(runs[0], runs[1], planes=2)
                # As stored (amplitude and angle) and read back by arbor_error_vector.
                meas = tuple(phasor(*amplitude_angle(z)) for z in sep.arbor)
                self.arbor_plan.append((day, runs[0], runs[1], (meas[0], meas[1])))
            d += dt.timedelta(days=sc.ARBOR_MEASURE_EVERY_DAYS)

    def arbor_true_error(self, day: dt.date) -> Pair:
        """The arbor's true error on ``day`` (g·mm per plane, arbor frame)."""
        span = max(1, (self.end - self.start).days + 20)
        frac = min(1.0, max(0.0, (day - self.start).days + 20) / span)
        out = [_rect(a * (1.0 + (sc.ARBOR_DRIFT - 1.0) * frac), g + sc.ARBOR_TURN_DEG * frac)
               for a, g in sc.ARBOR_ERROR_GMM]
        return out[0], out[1]

    def state_before(self, job_id: int, at: dt.datetime) -> str:
        """The job's state just before ``at`` (from the transitions it was given)."""
        state = "booked_in"
        for t, to_state in self.timeline.get(job_id, ()):
            if t >= at:
                break
            state = to_state
        return state

    def _type_model(self, spec: sc.RotorTypeSpec, customer_id: int) -> _TypeModel:
        mm = self.machines[spec.machine]
        row = RotorType(
            customer_id=customer_id, part_number=spec.part_number,
            description=spec.description, kind=spec.kind, one_off=False, mass_kg=spec.mass_kg,
            service_speed_rpm=spec.service_speed_rpm, first_critical_rpm=spec.first_critical_rpm,
            bearing_a_mm=spec.bearing_a_mm, bearing_b_mm=spec.bearing_b_mm,
            centre_of_mass_mm=spec.centre_of_mass_mm, plane_1_mm=spec.plane_1_mm,
            plane_2_mm=spec.plane_2_mm, radius_1_mm=spec.radius_1_mm,
            radius_2_mm=spec.radius_2_mm, method_1=spec.method, method_2=spec.method,
            positions_1=spec.positions, positions_2=spec.positions,
            first_position_1_deg=spec.first_position_deg,
            first_position_2_deg=spec.first_position_deg, density_g_cm3=spec.density_g_cm3,
            tolerance_grade=spec.tolerance_grade if spec.tolerance_method == "grade" else None,
            tolerance_gmm=spec.explicit_gmm if spec.tolerance_method == "explicit" else None,
            rotation=spec.rotation, key_convention="none", notes=spec.notes, archived=False,
        )
        tol_cols: dict[str, Any] = {"tolerance_method": spec.tolerance_method,
                                    "tolerance_grade": None, "journal_load_a_kg": None,
                                    "journal_load_b_kg": None, "explicit_limit_1_gmm": None,
                                    "explicit_limit_2_gmm": None}
        if spec.tolerance_method == "grade":
            tol_cols["tolerance_grade"] = spec.tolerance_grade
        elif spec.tolerance_method == "4w/n":
            tol_cols["journal_load_a_kg"] = tol_cols["journal_load_b_kg"] = spec.mass_kg / 2.0
        else:
            tol_cols["explicit_limit_1_gmm"] = tol_cols["explicit_limit_2_gmm"] = spec.explicit_gmm
        probe = Job(service_speed_rpm=spec.service_speed_rpm, **tol_cols)
        jt = job_calc.job_tolerance(probe, row)
        if jt.reference == "bearing_planes":
            assert jt.bearing_limits_gmm is not None
            t = transfer_matrix(spec.plane_1_mm, spec.plane_2_mm, spec.bearing_a_mm,
                                spec.bearing_b_mm)
            limits = _Limits(jt.reference, jt.bearing_limits_gmm,
                             (float(t[0, 0]), float(t[0, 1]), float(t[1, 0]), float(t[1, 1])))
        else:
            limits = _Limits(jt.reference, (jt.plane_limits_gmm[0], jt.plane_limits_gmm[1]), None)
        radii = (spec.radius_1_mm, spec.radius_2_mm)
        level = 0.5 * (jt.plane_limits_gmm[0] + jt.plane_limits_gmm[1])
        a_nom = self._plant(spec, mm, radii, level)
        # Reading of a tolerance-sized unbalance: the display shows ~3 digits of it.
        tol_reading = abs(a_nom[0]) * level / radii[0]
        decimals = min(3, max(0, 2 - math.floor(math.log10(tol_reading))))
        u_mar = mm.spec.claimed_emar_gmm_per_kg * spec.mass_kg
        noise_abs = 0.3 * u_mar * tol_reading / level + 0.5 * 10.0 ** -decimals
        trial = [0.0, 0.0]
        if mm.spec.reading_unit != "g·mm":
            for i in (0, 1):
                adv = influence.trial_mass_advice(spec.mass_kg, spec.balancing_speed_rpm,
                                                  radii[i], planes=2).mass_g
                trial[i] = _nice_mass(adv, spec.stock_g)
        tid = self.ids.take(RotorType)
        row.id = tid
        return _TypeModel(spec, tid, customer_id, mm, row, jt, limits, radii, a_nom, noise_abs,
                          decimals, (trial[0], trial[1]), tol_cols,
                          fleet_target=max(2, round(spec.fleet * self.fleet_scale)),
                          serial_width=max(4, len(str(round(spec.fleet * self.fleet_scale)))))

    def _plant(self, spec: sc.RotorTypeSpec, mm: _MachineModel, radii: tuple[float, float],
               level_gmm: float) -> Matrix:
        """Nominal ``A`` (reading units per gram at each plane's radius) on the type's machine."""
        rng = self.rng
        unit = mm.spec.reading_unit
        z1, z2 = spec.plane_1_mm, spec.plane_2_mm
        za, zb, zc = spec.bearing_a_mm, spec.bearing_b_mm, spec.centre_of_mass_mm
        if unit == "g·mm":
            # Calibrated machine: identity in g·mm plus a small plane-separation error.
            c = [complex(1.0 + rng.gauss(0, 0.015)) * _rect(1.0, rng.gauss(0, 1.2)),
                 _rect(0.03, rng.uniform(0, 360)), _rect(0.03, rng.uniform(0, 360)),
                 complex(1.0 + rng.gauss(0, 0.015)) * _rect(1.0, rng.gauss(0, 1.2))]
        elif unit == "mm/s":
            # Hard bearings: reading ∝ bearing force = Ω²·(equivalent unbalance in the bearing
            # planes, rigid-body statics); the gain is the range set for the rotor (~1.5 mm/s
            # for a tolerance-sized unbalance), the phases are the pick-ups'.
            t = transfer_matrix(z1, z2, za, zb)
            gain = 1.5 / level_gmm
            pa, pb = (_rect(1.0, p) for p in mm.phase_deg)
            c = [gain * pa * t[0, 0], gain * pa * t[0, 1], gain * pb * t[1, 0],
                 gain * pb * t[1, 1]]
        else:
            # Soft bearings, supercritical: the rotor turns about its centre of mass; the
            # bearing displacement is U/M (µm for g·mm and kg) plus the tilt from the moment
            # about the centre of mass, θ = Σ U_i·(z_i − z_c) / (M·k²), k = 0.3·span, and
            # lies opposite the heavy spot.
            m = spec.mass_kg
            k2 = (0.3 * abs(zb - za)) ** 2
            lag = _rect(-1.0, rng.uniform(4, 10))
            pa, pb = (_rect(1.0, p / 8.0) for p in mm.phase_deg)

            def p(zj: float, zi: float) -> float:
                return (1.0 + (zi - zc) * (zj - zc) / k2) / m

            c = [lag * pa * p(za, z1), lag * pa * p(za, z2), lag * pb * p(zb, z1),
                 lag * pb * p(zb, z2)]
        return (complex(c[0]) * radii[0], complex(c[1]) * radii[1], complex(c[2]) * radii[0],
                complex(c[3]) * radii[1])

    # ------------------------------------------------------------------ rotors

    def _new_rotor(self, tm: _TypeModel) -> _RotorModel:
        rng = self.rng
        n = len(tm.fleet) + 1
        spread = 0.008 if tm.calibrated else 0.02
        a = tuple(x * (1.0 + rng.gauss(0, spread)) * _rect(1.0, rng.gauss(0, 1.0))
                  for x in tm.a_nominal)
        rid = self.ids.take(Rotor)
        serial = f"{tm.spec.serial_prefix}-{n:0{tm.serial_width}d}"
        growth = 1.35 if rng.random() < 0.15 else 1.0
        r = _RotorModel(tm, rid, serial, a, growth)  # type: ignore[arg-type]
        tm.fleet.append(r)
        self.rotor_rows.append({"id": rid, "customer_id": tm.customer_id,
                                "rotor_type_id": tm.id, "serial_number": serial, "notes": "",
                                "archived": False, "created_at": _at(self.start, 7 * 60)})
        return r

    def _pick_rotor(self, tm: _TypeModel, day: dt.date) -> _RotorModel:
        """A serial of the type that is not in the shop (a few random tries), or a new one."""
        rng = self.rng
        fleet = tm.fleet
        if not fleet or (len(fleet) < tm.fleet_target and rng.random() < 0.35):
            return self._new_rotor(tm)
        for _ in range(8):
            r = fleet[rng.randrange(len(fleet))]
            if r.free_from <= day and not r.reserved:
                return r
        return self._new_rotor(tm)

    # ------------------------------------------------------------------ planning

    def plan(self, n_new: int) -> list[_Plan]:
        rng = self.rng
        days = []
        d = add_working_days(self.start, 0)
        while d <= self.end:
            days.append(d)
            d = add_working_days(d, 1)
        counts = [0] * len(days)
        for _ in range(n_new):
            counts[rng.randrange(len(days))] += 1
        heap: list[tuple[dt.date, int, int, _Plan | None]] = []
        order = 0
        for day, k in zip(days, counts, strict=True):
            for _ in range(k):
                heap.append((day, 0, order, None))
                order += 1
        heapq.heapify(heap)
        weights = [tm.spec.weight for tm in self.types]
        cum = list(np.cumsum(weights))
        plans: list[_Plan] = []
        operators = [i for i, p in enumerate(sc.PEOPLE) if p.role == "operator"]
        quality = [p.role for p in sc.PEOPLE].index("quality")
        while heap:
            day, _prio, _o, parent = heapq.heappop(heap)
            if parent is None:
                tm = self.types[bisect.bisect_right(cum, rng.random() * cum[-1])
                                if cum[-1] else 0]
                rotor = self._pick_rotor(tm, day)
                kind = "new"
            else:
                rotor = parent.rotor
                rotor.reserved = False
                kind = "return"
            op = quality if (rotor.type.spec.customer in ("srs", "lgw") and rng.random() < 0.4) \
                else operators[rng.randrange(len(operators))]
            p = self._plan_dates(len(plans), rotor, kind, parent, day, op)
            plans.append(p)
            rotor.free_from = (p.final_day + dt.timedelta(days=1)) if p.final_day \
                else dt.date.max
            rotor.visits += 1
            if (kind == "new" and p.fate == "normal" and p.final_day is not None
                    and rng.random() < RETURN_RATE):
                ret = add_working_days(p.final_day, rng.randint(8, 80))
                if ret <= self.end:
                    rotor.reserved = True
                    heapq.heappush(heap, (ret, 1, order, p))
                    order += 1
        return plans

    def _plan_dates(self, idx: int, rotor: _RotorModel, kind: str, parent: _Plan | None,
                    day: dt.date, operator: int) -> _Plan:
        rng = self.rng
        tm = rotor.type
        rush = rng.random() < 0.12
        booked = _at(day, WORKDAY_START_MIN + rng.uniform(0, 150))
        promised = add_working_days(day, 3 if rush else rng.choice((5, 6, 7, 8)))
        notes = rng.choice(sc.RETURN_NOTES) if kind == "return" else rng.choice(sc.JOB_NOTES)
        if rush and not notes:
            notes = "Rush: customer's line is down."
        ref = parent.order_ref if parent else f"PO-{rng.randint(10000, 99999)}"
        p = _Plan(idx, rotor, kind, parent, day, booked, promised, operator, notes, ref)
        r = rng.random()
        wait = 0 if rush else rng.choice((0, 0, 1, 1, 2, 2, 3, 4, 5, 6, 8))
        start_day = add_working_days(day, wait)
        if start_day == day:
            start_min = (booked - _at(day, 0)).total_seconds() / 60 + rng.uniform(30, 240)
        else:
            start_min = WORKDAY_START_MIN + rng.uniform(15, 390)
        p.start_at = _at(start_day, min(start_min, 15 * 60))
        if r < 0.015:
            p.fate = "reject_booked"
            p.reject_reason = rng.choice(sc.REJECT_BEFORE_RUN)
            p.reject_day = add_working_days(day, rng.choice((0, 1)))
            p.start_at = None
            p.final_day = p.reject_day
            return p
        if r < 0.03:
            p.fate = "reject_machine"
            p.reject_reason = rng.choice(sc.REJECT_ON_MACHINE)
            p.final_day = start_day
            return p
        p.two_day = rng.random() < (0.6 if tm.spec.mass_kg > 500 else 0.12)
        pass_day = add_working_days(start_day, 1) if p.two_day else start_day
        p.final_runs = 0 if self.runs_per_job else (
            rng.choice((1, 2)) if rng.random() < 0.25 else 0)
        lapse = tm.machine.lapse
        if lapse is not None and lapse[0] < pass_day < lapse[1]:
            # Balanced on a machine whose verification had lapsed: quality holds the
            # certificate, and after re-verification the check run is repeated.
            p.reopen = "overdue"
            p.reopen_day = add_working_days(lapse[1], rng.choice((0, 1)))
            p.certify2_day = add_working_days(p.reopen_day, rng.choice((0, 1)))
            p.dispatch2_day = add_working_days(p.certify2_day, rng.choice((0, 1, 1, 2)))
            p.final_day = p.dispatch2_day
            return p
        p.certify_day = add_working_days(pass_day, rng.choice((0, 0, 1)))
        # Dispatch waits for the customer's transport.
        p.dispatch_day = add_working_days(p.certify_day,
                                          0 if rush else rng.choice((0, 1, 1, 2, 3, 4)))
        p.final_day = p.dispatch_day
        r2 = rng.random()
        if r2 < 0.02:
            p.reopen = "disturbed_tol"
            p.reopen_day = p.certify_day
        elif r2 < 0.035:
            p.reopen = "disturbed_cert"
            p.reopen_day = p.dispatch_day
        elif r2 < 0.045:
            p.reopen = "disturbed_disp"
            p.reopen_day = add_working_days(p.dispatch_day, rng.randint(3, 15))
        if p.reopen:
            assert p.reopen_day is not None
            p.certify2_day = add_working_days(p.reopen_day, rng.choice((0, 1)))
            p.dispatch2_day = add_working_days(p.certify2_day, rng.choice((0, 1, 2)))
            p.final_day = p.dispatch2_day
        elif rng.random() < 0.04:
            p.reissue_day = add_working_days(p.certify_day, rng.randint(1, 20))
        return p

    # ------------------------------------------------------------------ simulation

    def simulate(self, plans: list[_Plan], steps: Steps | None) -> None:
        """Run every job's physics in the order its first run happened, writing as it goes."""
        order = sorted(plans, key=lambda p: (p.start_at or p.booked_at, p.idx))
        # Job numbers follow the booking order; ids too (returns come after their parent).
        numbering: dict[tuple[str, int], int] = {}
        yearly = per_year(self.pattern)
        for p in sorted(plans, key=lambda p: (p.booked_at, p.idx)):
            p.job_id = self.ids.take(Job)
            key = (str(p.received.year) if yearly else "", 0)
            numbering[key] = numbering.get(key, 0) + 1
            p.number = format_number(self.pattern, on=p.received, seq=numbering[key])
        self._insert(Rotor, self.rotor_rows)
        self.rotor_rows = []
        total = len(order)
        for i, p in enumerate(order):
            if p.parent is None or p.parent.result_dispatched:
                _JobSim(self, p).run()
            # else: the earlier job never left the shop, so there is no return
            if len(self.rows.jobs) >= 2000:
                self.flush_rows()  # rows in emission order: a parent job before its return
            if steps is not None and (i % 50 == 0 or i == total - 1):
                steps(i + 1, total)
        self.flush_rows()

    # ------------------------------------------------------------------ writing

    def flush_rows(self) -> None:
        """Insert the collected rows (foreign-key order) and forget them."""
        rows = self.rows
        for model, batch, name in (
            (Job, rows.jobs, "jobs"), (JobTransition, rows.transitions, "transitions"),
            (Run, rows.runs, "runs"), (RunReading, rows.readings, "readings"),
            (Correction, rows.corrections, "corrections"), (AuditEvent, rows.audits, "audits"),
        ):
            self._insert(model, batch)
            self.counts[name] += len(batch)
        self.rows_done["jobs"].extend(r["state"] for r in rows.jobs)
        for batch in (rows.jobs, rows.transitions, rows.runs, rows.readings, rows.corrections,
                      rows.audits):
            batch.clear()

    def write(self, steps: Steps | None) -> None:
        """The influence sets (their scores are final only now), then the id sequences."""
        sets = []
        for key_sets in self.sets.values():
            for s in key_sets:
                score = self.set_scores.get(s["id"])
                if score is not None:
                    s["last_used_at"], s["last_prediction_error_pct"] = score
                sets.append(s)
        sets.sort(key=lambda r: r["id"])
        self._insert(InfluenceSet, sets)
        self.counts["sets"] = len(sets)
        self.flush_rows()
        if self.job_sets:
            # The job rows went in before the sets (foreign keys), so their set comes now.
            job_t = Job.__table__
            self.session.execute(
                update(job_t).where(job_t.c.id == bindparam("jid"))
                .values(influence_set_id=bindparam("sid")), self.job_sets)
        _move_sequences(self.session)
        self.session.flush()


def _sqlite_converter(column: Any) -> Callable[[Any], Any] | None:
    """How SQLAlchemy would store a value of ``column`` in SQLite (None: as it is)."""
    kind = column.type
    if isinstance(kind, UTCDateTime | DateTime):
        return lambda v: v.astimezone(dt.UTC).strftime("%Y-%m-%d %H:%M:%S.%f")
    if isinstance(kind, Date):
        return lambda v: v.isoformat()
    if isinstance(kind, Boolean):
        return int
    if isinstance(kind, JSON):
        return json.dumps
    return None


def _insert_sqlite(session: Session, table: Any, rows: list[dict[str, Any]]) -> None:
    """executemany through the driver, values converted as the column types would."""
    cols = list(rows[0])
    sql = (f"INSERT INTO {table.name} ({', '.join(cols)}) "
           f"VALUES ({', '.join('?' for _ in cols)})")
    get = operator.itemgetter(*cols)
    convert = [(i, f) for i, c in enumerate(cols)
               if (f := _sqlite_converter(table.c[c])) is not None]
    conn = session.connection()
    for start in range(0, len(rows), CHUNK):
        params = []
        for row in rows[start:start + CHUNK]:
            values = list(get(row)) if len(cols) > 1 else [get(row)]
            for i, f in convert:
                if values[i] is not None:
                    values[i] = f(values[i])
            params.append(tuple(values))
        conn.exec_driver_sql(sql, params)


def _series_back(anchor: dt.date, interval_days: int, start: dt.date) -> list[dt.date]:
    """Working days every ``interval_days`` back from ``anchor`` to an interval before ``start``."""
    out = []
    d = anchor
    while d >= start - dt.timedelta(days=interval_days):
        out.append(add_working_days(d, 0))
        d -= dt.timedelta(days=interval_days)
    return out


def _nice_mass(mass_g: float, step_g: float) -> float:
    """A trial mass a shop would pick: two significant digits, a whole number of stock steps."""
    if mass_g <= 0:
        return step_g
    exp = math.floor(math.log10(mass_g)) - 1
    rounded = round(mass_g / 10**exp) * 10**exp
    return max(step_g, round(round(rounded / step_g) * step_g, 6))


def _round_step(mass_g: float, step_g: float) -> float:
    return round(round(mass_g / step_g) * step_g, 6)


def _move_sequences(session: Session) -> None:
    """After explicit ids, move PostgreSQL's id sequences past the largest id."""
    if session.get_bind().dialect.name != "postgresql":
        return
    for model in _ID_TABLES:
        name = model.__tablename__
        session.execute(text(
            f"SELECT setval(pg_get_serial_sequence('{name}', 'id'), "
            f"(SELECT COALESCE(MAX(id), 0) + 1 FROM {name}), false)"
        ))


# --------------------------------------------------------------------------- one job


class _JobSim:
    """Plays one job: physics, timeline, cut at the end date, rows."""

    def __init__(self, gen: _Generator, plan: _Plan) -> None:
        self.g = gen
        self.p = plan
        self.rng = gen.rng
        self.tm = plan.rotor.type
        self.solver = gen.solver
        self.events: list[_Event] = []
        self.runs: list[dict[str, Any]] = []  # local run records, index = seq - 1
        self.op_id = gen.users[plan.operator]
        self.person = sc.PEOPLE[plan.operator]
        self.a_est: Matrix | None = None
        self.source = "calibrated"
        self.stored: dict[str, Any] | None = None
        self.learned: dict[str, Any] | None = None
        self.clock = plan.start_at or plan.booked_at
        # Intake default of the jobs service: the customer asks for it, or 4W/N.
        self.test_required = bool(gen.requires_test[self.tm.customer_id]
                                  or self.tm.spec.tolerance_method == "4w/n")
        # On the shop arbor: its true error is in the readings; the job subtracts the
        # latest measured one (None: not on the arbor, or nothing to subtract yet).
        self.arbor_true: Pair | None = None
        self.arbor_sub: Pair | None = None

    # ---------------------------------------------------------------- physics helpers

    def tick(self, lo: float, hi: float) -> dt.datetime:
        self.clock = self.clock + dt.timedelta(seconds=round(self.rng.uniform(lo, hi) * 60))
        return self.clock

    def measure(self, u: Pair) -> tuple[tuple[float, float], tuple[float, float]]:
        """The machine display for true unbalance ``u`` (grams at R): noisy, rounded."""
        a = self.p.rotor.a_true
        rng = self.rng
        out = []
        extra = self.arbor_true or (0j, 0j)
        for k, v in enumerate((a[0] * u[0] + a[1] * u[1], a[2] * u[0] + a[3] * u[1])):
            v = v + extra[k]
            sigma = 0.006 * abs(v) + self.tm.noise_abs
            v = v + complex(rng.gauss(0, sigma), rng.gauss(0, sigma))
            amp, ang = amplitude_angle(v)
            amp = round(amp, self.tm.decimals)
            out.append((amp, float(round(ang) % 360) if amp > 0 else 0.0))
        return out[0], out[1]

    @staticmethod
    def phasors(reading: tuple[tuple[float, float], tuple[float, float]]) -> Pair:
        return _rect(*reading[0]), _rect(*reading[1])

    def seen(self, reading: tuple[tuple[float, float], tuple[float, float]]) -> Pair:
        """The reading as the job evaluates it: less the arbor error it subtracts."""
        v = self.phasors(reading)
        if self.arbor_sub is None:
            return v
        return v[0] - self.arbor_sub[0], v[1] - self.arbor_sub[1]

    def residual(self, reading: tuple[tuple[float, float], tuple[float, float]]) -> Pair:
        return self.solver.unbalance_gmm(self.a_est if not self.tm.calibrated else None,
                                         self.seen(reading), self.tm.radii)

    def add_run(self, purpose: str, reading: tuple[tuple[float, float], tuple[float, float]],
                within: bool | None = None, trial: tuple[int, float, float] | None = None,
                by: int | None = None) -> int:
        at = self.clock
        rec = {"purpose": purpose, "reading": reading, "within": within, "trial": trial,
               "by": by or self.op_id}
        self.runs.append(rec)
        self.events.append(_Event(at, "run", {"index": len(self.runs) - 1}))
        return len(self.runs) - 1

    def fit(self, w: Pair) -> tuple[list[dict[str, Any]], Pair]:
        """What the operator fits for advice ``w`` (grams at R) and its true effect."""
        rng = self.rng
        spec = self.tm.spec
        sig_m = self.person.mass_error
        sig_a = self.person.angle_error_deg
        recs: list[dict[str, Any]] = []
        effect = [0j, 0j]
        for i in (0, 1):
            mass, add_angle = amplitude_angle(w[i])
            radius = self.tm.radii[i]
            if spec.method == "remove":
                loc = normalize_deg(add_angle + 180.0)
                m_rec = _round_step(mass, spec.stock_g)
                if m_rec <= 0:
                    continue
                ang_rec = float(round(loc) % 360)
                assert spec.density_g_cm3 is not None and spec.drill_diameter_mm is not None
                holes = 1
                hole = removal.drill_depth(m_rec, spec.drill_diameter_mm, spec.density_g_cm3)
                while hole.depth_to_tip_mm > 2.5 * spec.drill_diameter_mm and holes < 6:
                    holes += 1
                    hole = removal.drill_depth(m_rec / holes, spec.drill_diameter_mm,
                                               spec.density_g_cm3)
                true_m = m_rec * (1.0 + rng.gauss(0, sig_m + 0.02))
                effect[i] += -_rect(true_m, ang_rec + rng.gauss(0, sig_a))
                recs.append({"plane": i + 1, "action": "remove", "mass_g": m_rec,
                             "angle_deg": ang_rec, "radius_mm": radius,
                             "advised_mass_g": mass, "advised_angle_deg": loc, "split": None,
                             "drill_diameter_mm": spec.drill_diameter_mm,
                             "drill_depth_mm": round(hole.depth_to_tip_mm, 2),
                             "drill_holes": holes})
            elif spec.positions:
                parts = positions.split_to_positions(mass, add_angle, spec.positions,
                                                     spec.first_position_deg).parts if mass > 0 \
                    else ()
                split = []
                total = 0j
                for part in parts:
                    m_p = _round_step(part.mass_g, spec.stock_g)
                    if m_p <= 0:
                        continue
                    split.append({"position": part.position, "angle_deg": part.angle_deg,
                                  "mass_g": m_p})
                    total += _rect(m_p, part.angle_deg)
                    effect[i] += _rect(m_p * (1.0 + rng.gauss(0, sig_m)),
                                       part.angle_deg + rng.gauss(0, 0.3 * sig_a))
                if not split:
                    continue
                m_sum = round(sum(s["mass_g"] for s in split), 6)
                recs.append({"plane": i + 1, "action": "add", "mass_g": m_sum,
                             "angle_deg": amplitude_angle(total)[1], "radius_mm": radius,
                             "advised_mass_g": mass, "advised_angle_deg": add_angle,
                             "split": split, "drill_diameter_mm": None,
                             "drill_depth_mm": None, "drill_holes": None})
            else:
                m_rec = _round_step(mass, spec.stock_g)
                if m_rec <= 0:
                    continue
                ang_rec = float(round(add_angle) % 360)
                effect[i] += _rect(m_rec * (1.0 + rng.gauss(0, sig_m)),
                                   ang_rec + rng.gauss(0, sig_a))
                recs.append({"plane": i + 1, "action": "add", "mass_g": m_rec,
                             "angle_deg": ang_rec, "radius_mm": radius,
                             "advised_mass_g": mass, "advised_angle_deg": add_angle,
                             "split": None, "drill_diameter_mm": None, "drill_depth_mm": None,
                             "drill_holes": None})
        return recs, (effect[0], effect[1])

    # ---------------------------------------------------------------- the job

    def initial_unbalance(self) -> Pair:
        rng = self.rng
        tm = self.tm
        visits = max(0, self.p.rotor.visits - 1)
        ratio = tm.spec.initial_ratio * math.exp(rng.gauss(0, 0.45))
        ratio *= self.p.rotor.growth ** visits
        if self.p.kind == "return":
            ratio *= 1.5
        ratio = min(max(ratio, 2.5), 60.0)
        out = []
        for i in (0, 1):
            lim = tm.tolerance.plane_limits_gmm[i]
            mag = ratio * lim * rng.uniform(0.5, 1.0) / tm.radii[i]
            out.append(_rect(mag, rng.uniform(0, 360)))
        return out[0], out[1]

    def set_key(self) -> tuple[int, int, float]:
        tm = self.tm
        return (tm.id, tm.machine.id, tm.spec.balancing_speed_rpm)

    def choose_coefficients(self) -> None:
        tm = self.tm
        if tm.calibrated:
            self.source = "calibrated"
            self.a_est = (complex(tm.radii[0]), 0j, 0j, complex(tm.radii[1]))
            return
        assert self.p.start_at is not None
        usable = [s for s in self.g.sets.get(self.set_key(), [])
                  if s["learned_at"] < self.p.start_at]
        if usable and self.rng.random() < STORED_SET_USE:
            self.stored = max(usable, key=lambda s: (s["learned_at"], s["id"]))
            c = self.stored["coefficients"]
            self.a_est = tuple(complex(re, im) for re, im in c)  # type: ignore[assignment]
            self.source = "stored"
        else:
            self.source = "trials"

    def trials(self, u0: Pair, v0: tuple[tuple[float, float], tuple[float, float]]) -> None:
        """Two trial runs (mass removed before the next) and the coefficients from them."""
        rng = self.rng
        spec = self.tm.spec
        a = self.p.rotor.a_true
        v0c = self.phasors(v0)
        trials = []
        for plane in (1, 2):
            mass = self.tm.trial_g[plane - 1]
            angle = spec.first_position_deg + (
                360.0 / spec.positions * rng.randrange(spec.positions) if spec.positions
                else rng.choice((0.0, 90.0, 180.0, 270.0)))
            angle = normalize_deg(angle)
            # The operator sizes the trial mass to move the reading by a third or more.
            for _ in range(6):
                col = (a[0], a[2]) if plane == 1 else (a[1], a[3])
                change = max(abs(col[0] * mass) / max(abs(v0c[0]), 1e-12),
                             abs(col[1] * mass) / max(abs(v0c[1]), 1e-12))
                if change >= 0.35:
                    break
                mass = _round_step(mass * 2.0, spec.stock_g)
            t = _rect(mass, angle)
            u = (u0[0] + t, u0[1]) if plane == 1 else (u0[0], u0[1] + t)
            self.tick(10, 25)
            reading = self.measure(u)
            self.add_run("trial", reading, trial=(plane, mass, angle))
            trials.append((plane, mass, angle, self.phasors(reading)))
        self.a_est, self.cond = self.solver.coefficients(v0c, trials)

    def correct_until_passed(self, u: Pair, answering: int, max_cycles: int = MAX_CYCLES
                             ) -> tuple[Pair, bool]:
        """Correction, check run, … until a check (and any final runs) pass."""
        assert self.a_est is not None
        cycles = 0
        finals_due = self.p.final_runs
        while True:
            v = self.seen(self.runs[answering]["reading"])
            w = self.solver.correction(self.a_est, v)
            recs, effect = self.fit(w)
            if recs:
                drilling = any(r["action"] == "remove" for r in recs)
                self.tick(20, 45) if drilling else self.tick(8, 25)
                self.events.append(_Event(self.clock, "corr",
                                          {"answering": answering, "recs": recs}))
            u = (u[0] + effect[0], u[1] + effect[1])
            cycles += 1
            self.tick(8, 18)
            reading = self.measure(u)
            ok = self.solver.passed(self.tm, self.residual(reading))
            idx = self.add_run("check", reading, within=ok)
            if self.stored is not None and recs:
                self.score(answering, recs, reading)
            if ok:
                all_ok = True
                extra = finals_due
                if self.g.runs_per_job:
                    extra = max(0, self.g.runs_per_job - len(self.runs))
                for _ in range(extra):
                    self.tick(4, 9)
                    r2 = self.measure(u)
                    ok2 = self.solver.passed(self.tm, self.residual(r2))
                    idx = self.add_run("final", r2, within=ok2)
                    if not ok2:
                        all_ok = False
                        break
                if all_ok:
                    return u, True
                finals_due = 0
            if cycles >= max_cycles:
                return u, False
            answering = idx

    def score(self, answering: int, recs: list[dict[str, Any]],
              reading: tuple[tuple[float, float], tuple[float, float]]) -> None:
        """How well the stored set predicted this check run (as the jobs service scores it)."""
        assert self.stored is not None
        applied = [0j, 0j]
        for r in recs:
            flip = 180.0 if r["action"] == "remove" else 0.0
            if r["split"]:
                for part in r["split"]:
                    applied[r["plane"] - 1] += _rect(part["mass_g"], part["angle_deg"] + flip)
            else:
                applied[r["plane"] - 1] += _rect(r["mass_g"], r["angle_deg"] + flip)
        a = np.array(self.a_est, dtype=complex).reshape(2, 2)
        err = prediction_error_pct(
            a, list(self.phasors(self.runs[answering]["reading"])), applied,
            list(self.phasors(reading)))
        self.events.append(_Event(self.clock, "score", {"set": self.stored["id"], "err": err}))

    def tr(self, at: dt.datetime, frm: str | None, to: str, reason: str = "",
           by: int | None = None, action: str = "") -> None:
        self.events.append(_Event(at, "tr", {"from": frm, "to": to, "reason": reason,
                                             "by": by or self.op_id, "action": action}))

    def day_at(self, day: dt.date, lo: float, hi: float) -> dt.datetime:
        self.clock = max(self.clock, _at(day, WORKDAY_START_MIN + self.rng.uniform(lo, hi)))
        return self.clock

    def run(self) -> None:
        p = self.p
        rng = self.rng
        self.tr(p.booked_at, None, "booked_in",
                "booked in" if p.kind == "new" else "customer return", action="book_in")
        if p.fate == "reject_booked":
            assert p.reject_day is not None
            at = max(_at(p.reject_day, WORKDAY_START_MIN + rng.uniform(60, 420)),
                     p.booked_at + dt.timedelta(minutes=20))
            self.tr(at, "booked_in", "rejected", p.reject_reason, action="reject")
            self.emit()
            return
        assert p.start_at is not None
        self.clock = p.start_at
        self.mount_on_arbor()
        u = self.initial_unbalance()
        self.choose_coefficients()
        self.tr(self.clock, "booked_in", "on_machine", "first run logged (initial)",
                action="start")
        v0 = self.measure(u)
        initial = self.add_run("initial", v0)
        if p.fate == "reject_machine":
            self.tick(10, 40)
            self.tr(self.clock, "on_machine", "rejected", p.reject_reason, action="reject")
            self.emit()
            return
        if self.source == "trials":
            self.trials(u, v0)
        if p.two_day:
            self.clock = _at(add_working_days(self.clock.date(), 1),
                             WORKDAY_START_MIN + rng.uniform(0, 90))
        u, ok = self.correct_until_passed(u, initial)
        if ok:
            u, ok = self.residual_test(u)
        if not ok:
            self.tick(5, 20)
            self.tr(self.clock, "on_machine", "rejected", sc.REJECT_ON_MACHINE[1],
                    action="reject")
            self.emit()
            return
        self.tick(1, 4)
        self.tr(self.clock, "on_machine", "in_tolerance", action="in_tolerance")
        if self.source == "trials":
            # A new set per learning job: an older job keeps the set it used (or those
            # learned before its initial run), so a later set never re-judges it.
            self.learn()
        if p.reopen == "overdue":
            self.reopen_overdue(u)
        else:
            u = self.certify_and_dispatch(u)
        self.emit()

    def mount_on_arbor(self) -> None:
        """Impellers of the arbor's rotor type are balanced on the shop arbor."""
        g = self.g
        if not g.arbor_plan or self.tm.spec.part_number != sc.ARBOR_ROTOR_TYPE:
            return
        day = self.clock.date()
        self.arbor_true = g.arbor_true_error(day)
        known = [k for k, m in enumerate(g.arbor_plan) if m[0] <= day]
        measurement = known[-1] if known else None
        if measurement is not None:
            self.arbor_sub = g.arbor_plan[measurement][3]
        self.events.append(_Event(self.clock, "arbor", {"measurement": measurement,
                                                        "by": self.op_id}))

    def residual_test(self, u: Pair) -> tuple[Pair, bool]:
        """The residual-unbalance test of a job that requires one, before in_tolerance.

        Per plane the test mass job_traceability suggests (2 × the plane's limit at
        the correction radius, in stock steps, not above it) at 8 positions and back
        at position 1; readings ``S·(U_res + T·e^{iθ_k})`` with ``S`` the machine's
        sensitivity in that plane and ``U_res`` the rotor's true residual, noisy and
        rounded like the display. Judged as the service will
        (:func:`shopapp.jobs.residual_tests.evaluate_residual_test`): an
        invalid test is repeated, one over the limit means another correction.
        One job of the history gets a repeat of position 1 that disagrees.
        """
        if not self.test_required or not self.g.exact:
            return u, True
        g = self.g
        g.rtest_jobs += 1
        spoil = g.rtest_jobs == 2
        for _attempt in range(6):
            ok = True
            for plane in (1, 2):
                for _try in range(6):
                    self.tick(12, 25)
                    rec, out = self.one_residual_test(u, plane, spoil)
                    spoil = False
                    self.events.append(_Event(self.clock, "rtest", rec))
                    if out.valid:
                        break
                if not (out.valid and out.within_tolerance):
                    ok = False
            if ok:
                return u, True
            self.p.final_runs = 0
            u, passed = self.correct_until_passed(u, len(self.runs) - 1, max_cycles=3)
            if not passed:
                return u, False
        return u, False

    def one_residual_test(self, u: Pair, plane: int, spoil: bool
                          ) -> tuple[dict[str, Any], ResidualOutcome]:
        rng = self.rng
        tm = self.tm
        i = plane - 1
        radius = tm.radii[i]
        limit = tm.tolerance.plane_limits_gmm[i]
        step = tm.spec.stock_g
        mass = round(max(step, math.floor(SUGGESTED_FACTOR * limit / radius / step) * step), 6)
        t_gmm = mass * radius
        a = self.p.rotor.a_true
        sens = (a[0] if plane == 1 else a[3]) / radius  # reading per g·mm in this plane
        u_res = u[i] * radius

        def read(theta: float) -> tuple[float, float]:
            z = sens * (u_res + _rect(t_gmm, theta))
            # A settled reading (the operator waits for the display): a third of a run's noise.
            sigma = 0.004 * abs(z) + tm.noise_abs / 3.0
            z += complex(rng.gauss(0, sigma), rng.gauss(0, sigma))
            amp, ang = amplitude_angle(z)
            return round(amp, tm.decimals), float(round(ang) % 360)

        pos = tr.equally_spaced_deg(8)
        points = [read(p) for p in pos]
        rep_amp, rep_ang = read(pos[0])
        if spoil:  # the rotor shifted on its supports during the test
            rep_amp = round(rep_amp * 1.3, tm.decimals)
        rec = {"plane": plane, "test_mass_g": mass, "test_radius_mm": radius, "positions": 8,
               "amplitudes": [x for x, _ in points], "angles_deg": [y for _, y in points],
               "repeat_amplitude": rep_amp, "repeat_angle_deg": rep_ang,
               "unit": tm.machine.spec.reading_unit, "by": self.op_id}
        out = evaluate_residual_test(
            plane=plane, test_mass_g=mass, test_radius_mm=radius, positions=8,
            amplitudes=rec["amplitudes"], angles_deg=rec["angles_deg"],
            repeat_amplitude=rep_amp, repeat_angle_deg=rep_ang, permissible_gmm=limit)
        return rec, out

    def learn(self) -> None:
        assert self.a_est is not None
        tm = self.tm
        s = {"id": self.g.ids.take(InfluenceSet), "rotor_type_id": tm.id,
             "machine_id": tm.machine.id, "speed_rpm": tm.spec.balancing_speed_rpm,
             "planes": 2, "coefficients": [[z.real, z.imag] for z in self.a_est],
             "reading_unit": tm.machine.spec.reading_unit, "condition_number": self.cond,
             "source_job_id": self.p.job_id, "last_prediction_error_pct": None,
             "last_used_at": None, "learned_at": self.clock}
        self.learned = s
        self.events.append(_Event(self.clock, "learn", {"set": s}))

    def certify(self, day: dt.date) -> None:
        # At least a minute after reaching tolerance (transitions keep their order).
        self.clock += dt.timedelta(minutes=1)
        self.day_at(day, 60, 480)
        self.tr(self.clock, "in_tolerance", "certified", by=self.g.quality_id,
                action="certified")
        self.events.append(_Event(self.clock, "cert", {"what": "issue"}))

    def dispatch(self, day: dt.date) -> None:
        # At least a minute after the certificate, so the two transitions keep their order.
        self.clock += dt.timedelta(minutes=1)
        self.day_at(day, 90, 510)
        self.tr(self.clock, "certified", "dispatched", action="dispatch")

    def certify_and_dispatch(self, u: Pair) -> Pair:
        p = self.p
        assert p.certify_day is not None and p.dispatch_day is not None
        if p.reopen == "disturbed_tol":
            return self.rework(u, "in_tolerance", p.certify_day,
                               self.rng.choice(sc.REOPEN_DISTURBED))
        self.certify(p.certify_day)
        if p.reopen == "disturbed_cert":
            return self.rework(u, "certified", p.dispatch_day,
                               self.rng.choice(sc.REOPEN_DISTURBED))
        self.dispatch(p.dispatch_day)
        if p.reopen == "disturbed_disp":
            return self.rework(u, "dispatched", p.reopen_day, sc.REOPEN_AFTER_DISPATCH)
        if p.reissue_day is not None:
            self.day_at(p.reissue_day, 30, 450)
            self.events.append(_Event(self.clock, "cert", {"what": "reissue",
                                                           "reason": sc.REISSUE_REASON}))
        return u

    def rework(self, u: Pair, frm: str, day: dt.date | None, reason: str) -> Pair:
        """Reopen after a disturbance: check, correct until passed, certify, dispatch."""
        rng = self.rng
        p = self.p
        assert day is not None and p.certify2_day is not None and p.dispatch2_day is not None
        self.day_at(day, 30, 300)
        self.tr(self.clock, frm, "on_machine", reason, action="reopen")
        if frm in ("certified", "dispatched"):
            self.events.append(_Event(self.clock, "cert", {"what": "void", "reason": reason}))
        # A loose or knocked weight: 1.5–4 × the plane limit appears in one plane.
        plane = rng.randrange(2)
        lim = self.tm.tolerance.plane_limits_gmm[plane] / self.tm.radii[plane]
        kick = _rect(rng.uniform(1.5, 4.0) * lim, rng.uniform(0, 360))
        u = (u[0] + kick, u[1]) if plane == 0 else (u[0], u[1] + kick)
        self.tick(20, 60)
        reading = self.measure(u)
        ok = self.solver.passed(self.tm, self.residual(reading))
        idx = self.add_run("check", reading, within=ok)
        if not ok:
            self.p.final_runs = 0
            u, ok = self.correct_until_passed(u, idx)
        u, _ok = self.residual_test(u)
        self.tick(1, 4)
        self.tr(self.clock, "on_machine", "in_tolerance", action="in_tolerance")
        self.certify(max(p.certify2_day, self.clock.date()))
        self.dispatch(max(p.dispatch2_day, self.clock.date()))
        return u

    def reopen_overdue(self, u: Pair) -> None:
        p = self.p
        tm = self.tm
        assert p.reopen_day is not None and tm.machine.lapse is not None
        due, verified = tm.machine.lapse
        reason = sc.REOPEN_MACHINE_OVERDUE.format(
            machine=tm.machine.spec.name + self.g.tag, due=due.isoformat(),
            verified=verified.isoformat())
        self.day_at(p.reopen_day, 30, 300)
        self.tr(self.clock, "in_tolerance", "on_machine", reason, by=self.g.quality_id,
                action="reopen")
        self.tick(20, 60)
        reading = self.measure(u)
        ok = self.solver.passed(tm, self.residual(reading))
        idx = self.add_run("check", reading, within=ok)
        if not ok:
            self.p.final_runs = 0
            u, ok = self.correct_until_passed(u, idx)
        u, _ok = self.residual_test(u)
        self.tick(1, 4)
        self.tr(self.clock, "on_machine", "in_tolerance", action="in_tolerance")
        assert p.certify2_day is not None and p.dispatch2_day is not None
        self.certify(max(p.certify2_day, self.clock.date()))
        self.dispatch(max(p.dispatch2_day, self.clock.date()))

    # ---------------------------------------------------------------- rows

    def emit(self) -> None:
        """Cut the timeline at the end date and turn it into rows."""
        g = self.g
        p = self.p
        tm = self.tm
        job_id = p.job_id
        events = [e for e in self.events if e.at <= g.end_at]
        state = "booked_in"
        first_tol: dt.datetime | None = None
        dispatched_on: dt.date | None = None
        reopen_count = 0
        reject_reason = ""
        run_ids: dict[int, int] = {}
        seq = 0
        started = False
        last_at = p.booked_at
        timeline: list[tuple[dt.datetime, str]] = []
        set_recorded = False
        for e in events:
            last_at = max(last_at, e.at)
            if e.kind == "tr":
                d = e.data
                timeline.append((e.at, d["to"]))
                if d["action"] == "certified" and g.with_certificates:
                    # Written by the certificates service when it issues (_replay).
                    state = d["to"]
                    continue
                g.rows.transitions.append({
                    "id": g.ids.take(JobTransition), "job_id": job_id, "from_state": d["from"],
                    "to_state": d["to"], "reason": d["reason"], "by_id": d["by"], "at": e.at})
                after: dict[str, Any] = {"state": d["to"]}
                if d["reason"]:
                    after["reason"] = d["reason"]
                if d["to"] == "in_tolerance" and first_tol is None:
                    first_tol = e.at
                if d["to"] == "dispatched":
                    dispatched_on = e.at.date()
                    after["dispatched_on"] = dispatched_on.isoformat()
                if d["action"] == "reopen":
                    reopen_count += 1
                    dispatched_on = None
                    after["reopen_count"] = reopen_count
                if d["to"] == "rejected":
                    reject_reason = d["reason"]
                if d["to"] == "on_machine" and not started:
                    started = True
                before = None if d["from"] is None else {"state": d["from"]}
                if d["action"] == "book_in":
                    after = {"number": p.number, "serial_number": p.rotor.serial,
                             "kind": p.kind, "state": "booked_in"}
                g._audit(e.at, d["by"], "job", job_id, d["action"], after=after, before=before,
                         job_id=job_id)
                state = d["to"]
            elif e.kind == "run":
                rec = self.runs[e.data["index"]]
                seq += 1
                rid = g.ids.take(Run)
                run_ids[e.data["index"]] = rid
                trial = rec["trial"]
                g.rows.runs.append({
                    "id": rid, "job_id": job_id, "seq": seq, "purpose": rec["purpose"],
                    "speed_rpm": tm.spec.balancing_speed_rpm,
                    "trial_plane": trial[0] if trial else None,
                    "trial_mass_g": trial[1] if trial else None,
                    "trial_angle_deg": trial[2] if trial else None,
                    "trial_radius_mm": tm.radii[trial[0] - 1] if trial else None,
                    "earlier_trial_left_on": False, "within_tolerance": rec["within"],
                    "notes": "", "by_id": rec["by"], "taken_at": e.at})
                unit = tm.machine.spec.reading_unit
                readings = []
                for plane, (amp, ang) in enumerate(rec["reading"], start=1):
                    g.rows.readings.append({"id": g.ids.take(RunReading), "run_id": rid,
                                            "plane": plane, "amplitude": amp,
                                            "angle_deg": ang, "unit": unit})
                    readings.append([plane, amp, ang, unit])
                after = {"seq": seq, "purpose": rec["purpose"], "readings": readings}
                if trial:
                    after.update(trial_plane=trial[0], trial_mass_g=trial[1],
                                 trial_angle_deg=trial[2])
                g._audit(e.at, rec["by"], "run", rid, "record_run", after=after, job_id=job_id)
            elif e.kind == "corr":
                answering = run_ids[e.data["answering"]]
                if self.source == "stored" and self.stored is not None and not set_recorded:
                    # As jobs.record_correction does: the job keeps the set it used.
                    set_recorded = True
                    g.job_sets.append({"jid": job_id, "sid": self.stored["id"]})
                    g._audit(e.at, self.op_id, "job", job_id, "use_influence_set",
                             before={"influence_set_id": None},
                             after={"influence_set_id": self.stored["id"]}, job_id=job_id)
                for r in e.data["recs"]:
                    cid = g.ids.take(Correction)
                    g.rows.corrections.append({"id": cid, "job_id": job_id, "run_id": answering,
                                               **r, "applied_by_id": self.op_id,
                                               "applied_at": e.at})
                    g._audit(e.at, self.op_id, "correction", cid, "record_correction",
                             after={"plane": r["plane"], "action": r["action"],
                                    "mass_g": r["mass_g"], "angle_deg": r["angle_deg"],
                                    "run_id": answering}, job_id=job_id)
            elif e.kind == "learn":
                s = e.data["set"]
                key = (s["rotor_type_id"], s["machine_id"], s["speed_rpm"])
                g.sets.setdefault(key, []).append(s)
                g._audit(e.at, self.op_id, "influence_set", s["id"], "learn",
                         after={"source_job_id": job_id, "speed_rpm": s["speed_rpm"],
                                "condition_number": s["condition_number"]}, job_id=job_id)
            elif e.kind == "score":
                sid = e.data["set"]
                old = g.set_scores.get(sid)
                if old is None or old[0] <= e.at:
                    g.set_scores[sid] = (e.at, e.data["err"])
                g._audit(e.at, self.op_id, "influence_set", sid, "prediction_scored",
                         after={"last_prediction_error_pct": e.data["err"]}, job_id=job_id)
            elif e.kind == "cert":
                g.cert_jobs.add(job_id)
                if g.with_certificates:
                    g.ops.append((e.at, len(g.ops), job_id, "cert", dict(e.data)))
            elif e.kind in ("arbor", "rtest"):
                g.ops.append((e.at, len(g.ops), job_id, e.kind, dict(e.data)))
        g.timeline[job_id] = timeline
        g.final[job_id] = (state, last_at)
        p.result_state = state
        p.result_dispatched = state == "dispatched"
        g.rows.jobs.append({
            "id": job_id, "number": p.number, "customer_id": tm.customer_id,
            "rotor_id": p.rotor.id, "machine_id": tm.machine.id,
            "operator_id": self.op_id if started else None, "state": state, "kind": p.kind,
            "return_of_job_id": p.parent.job_id if p.parent else None,
            "customer_order_ref": p.order_ref, "received_on": p.received,
            "promised_on": p.promised, "dispatched_on": dispatched_on,
            "first_in_tolerance_at": first_tol, **tm.tol_columns,
            "service_speed_rpm": tm.spec.service_speed_rpm,
            "balancing_speed_rpm": tm.spec.balancing_speed_rpm,
            "residual_test_required": self.test_required,
            "reopen_count": reopen_count, "reject_reason": reject_reason, "notes": p.notes,
            "created_at": p.booked_at, "updated_at": last_at,
        })


# --------------------------------------------------------------------------- replay


def _date_new_audits(session: Session, at: dt.datetime) -> None:
    """Date the audit events a service call just added (not yet flushed) at ``at``."""
    for obj in session.new:
        if isinstance(obj, AuditEvent):
            obj.at = at


def _proving_readings(rng: random.Random, machine: Machine, rotor: Any) -> dict[str, Any]:
    """One proving test's readings: the test mass at the 8 holes of each plane, and URR.

    Simulated (invented) as ISO 21940-21's idea has it, from memory: the
    proving rotor's residual per plane (0.2–0.6 × the plane's share of the
    claimed U_mar) plus a test unbalance of 15 × that share moved round the
    holes, read by the machine with 0.4 % gain and 1 % of the share noise;
    the reduction-ratio step removes a known unbalance with a few points of
    margin over the claimed URR. Evaluated by the service.
    """
    claim = machine.claimed_emar_gmm_per_kg * rotor.mass_kg
    share = claim / 2.0  # two planes (traceability's rule)
    mass = round(15.0 * share / rotor.radius_1_mm, 3)
    t_gmm = mass * rotor.radius_1_mm
    pos = tr.equally_spaced_deg(rotor.positions)
    amps: list[list[float]] = []
    angs: list[list[float]] = []
    for _plane in (1, 2):
        residual = _rect(share * rng.uniform(0.2, 0.6), rng.uniform(0, 360))
        row_a, row_g = [], []
        for p in pos:
            z = (residual + _rect(t_gmm, p)) * (1.0 + rng.gauss(0, 0.004))
            z += complex(rng.gauss(0, 0.01 * share), rng.gauss(0, 0.01 * share))
            a, g = amplitude_angle(z)
            row_a.append(round(a, 2))
            row_g.append(round(g, 1) % 360.0)
        amps.append(row_a)
        angs.append(row_g)
    before = [round(20.0 * share * rng.uniform(0.8, 1.2), 1) for _ in range(2)]
    urr = [min(99.5, (machine.claimed_urr_pct or 90.0) + rng.uniform(1.0, 6.0))
           for _ in range(2)]
    after = [round(b * (1.0 - r / 100.0), 2) for b, r in zip(before, urr, strict=True)]
    return {"test_mass_g": mass, "test_radius_mm": rotor.radius_1_mm, "indicated_gmm": amps,
            "indicated_angles_deg": angs, "urr_before_gmm": before, "urr_after_gmm": after}


def _register(session: Session, gen: _Generator, quality: User, admin: User) -> None:
    """Proving rotors and tests, the arbor's error history, key conventions (the services)."""
    t_setup = _at(gen.start - dt.timedelta(days=30), 9 * 60)
    rng = gen.register_rng
    for mm in gen.machines.values():
        spec = mm.spec
        machine = session.get(Machine, mm.id)
        assert machine is not None
        radius = sc.PROVING_RADIUS_MM.get(spec.key, 100.0)
        rotor = tr.create_proving_rotor(
            session, by=quality, name=spec.proving_rotor + gen.tag,
            mass_kg=spec.proving_rotor_mass_kg, planes=2, radius_1_mm=radius,
            radius_2_mm=radius, positions=8, notes="The shop's own proving rotor (demo).")
        rotor.created_at = t_setup
        _date_new_audits(session, t_setup)
        for day in gen.verification_dates[spec.key]:
            row = tr.record_proving_test(
                session, machine, by=quality, performed_on=day, proving_rotor=rotor,
                notes="demo proving-rotor test", **_proving_readings(rng, machine, rotor))
            if not row.passed:
                raise DemoRefused(f"demo: the proving test of {machine.name} on {day} failed "
                                  f"({'; '.join(row.readings.get('reasons', []))})")
            row.created_at = _at(day, 15 * 60)
            _date_new_audits(session, row.created_at)
    if gen.arbor_plan:
        spec = next(t for t in sc.ROTOR_TYPES if t.part_number == sc.ARBOR_ROTOR_TYPE)
        operator = session.get(User, gen.users[0])
        assert operator is not None
        gen.arbor_row = tr.create_arbor(session, by=quality, name=sc.ARBOR_NAME + gen.tag,
                                        description=sc.ARBOR_DESCRIPTION, mass_kg=6.5)
        gen.arbor_row.created_at = t_setup
        _date_new_audits(session, t_setup)
        for day, first, second, _meas in gen.arbor_plan:
            m = tr.record_arbor_error(
                session, gen.arbor_row, by=operator, measured_on=day, first_run=first,
                second_run=second, planes=2, rotor_mass_kg=spec.mass_kg,
                notes="Index runs with the reference impeller (0° and 180° on the arbor).")
            m.created_at = _at(day, 8 * 60)
            _date_new_audits(session, m.created_at)
            gen.arbor_rows.append(m)
    for tm in gen.types:
        key = sc.KEY_CONVENTIONS.get(tm.spec.part_number)
        if key is not None:
            rt = session.get(RotorType, tm.id)
            assert rt is not None
            tr.set_key_convention(session, rt, by=admin, **key)  # type: ignore[arg-type]
            _date_new_audits(session, t_setup)
    session.flush()


def _replay(session: Session, gen: _Generator, steps: Steps | None) -> int:
    """Write the traceability records and certificates through their services, dated then.

    In the order things happened: each job is put in the state it had at that
    moment (from the transitions written for it) so the services judge it as
    they would have, then given back its final state. Certificates:
    :func:`shopapp.certificates.issue.issue` (which marks the job certified
    and writes that transition), ``reissue`` (a few, for an order reference
    the first revision carried mistyped) and ``void`` (a certified job
    reopened), each with its historical time; the PDFs are rendered as they
    are issued (most of the time, ~0.05 s each). Returns how many certificate
    revisions were issued.
    """
    quality = session.get(User, gen.quality_id)
    admin = session.get(User, gen.admin_id)
    assert quality is not None and admin is not None
    users = {uid: session.get(User, uid) for uid in gen.users}
    # Held here: the session keeps rows only weakly, and every certificate reads these.
    keep = [get_settings(session), *session.scalars(select(Machine))]
    _register(session, gen, quality, admin)
    ops = sorted(gen.ops, key=lambda o: (o[0], o[1]))
    touched: dict[int, Job] = {}
    issued = 0
    with session.no_autoflush:  # the services flush what they write
        issued = _replay_ops(session, gen, ops, users, quality, touched, steps)
    for job_id, job in touched.items():
        job.state, job.updated_at = gen.final[job_id]
    session.flush()
    del keep
    return issued


def _replay_ops(session: Session, gen: _Generator,
                ops: list[tuple[dt.datetime, int, int, str, dict[str, Any]]],
                users: dict[int, User | None], quality: User, touched: dict[int, Job],
                steps: Steps | None) -> int:
    from shopapp.certificates import issue as cert_service
    from shopapp.certificates import queries as cert_queries
    from shopapp.core.errors import ServiceError as _ServiceError
    from shopapp.jobs import certificate_link

    reissued = {job_id for _at, _o, job_id, kind, d in ops
                if kind == "cert" and d["what"] == "reissue"}
    issued = 0
    for n, (at, _order, job_id, kind, data) in enumerate(ops, start=1):
        job = touched.get(job_id) or session.get(Job, job_id)
        assert job is not None
        touched[job_id] = job
        job.state = gen.state_before(job_id, at)
        try:
            if kind == "arbor":
                by = users[data["by"]]
                jt.set_job_arbor(session, job, by=by, arbor=gen.arbor_row)
                if data["measurement"] is not None:
                    jt.set_arbor_subtraction(session, job, by=by,
                                             measurement=gen.arbor_rows[data["measurement"]])
                _date_new_audits(session, at)
            elif kind == "rtest":
                fields = {k: v for k, v in data.items() if k != "by"}
                record_residual_test(session, job, by=users[data["by"]], performed_at=at,
                                     **fields)
            elif data["what"] == "issue":
                order_ref = job.customer_order_ref
                first = job_id in reissued and not cert_queries.job_certificates(session, job)
                if first:
                    # The first copy carried the customer's order reference mistyped.
                    job.customer_order_ref = order_ref[:-1] + "0"
                cert_service.issue(session, job, by=quality, issued_at=at)
                job.customer_order_ref = order_ref
                issued += 1
            else:
                cert = certificate_link.current_certificate(session, job)
                if cert is None:
                    continue
                if data["what"] == "reissue":
                    cert_service.reissue(session, cert, by=quality, reason=data["reason"],
                                         issued_at=at)
                    issued += 1
                else:
                    cert_service.void(session, cert, by=quality,
                                      reason=f"job reopened: {data['reason']}", voided_at=at)
        except _ServiceError as exc:
            raise DemoRefused(f"demo job {job.number} ({kind} at {at.isoformat()}): "
                              f"{exc.message}") from None
        if steps is not None and (n % 25 == 0 or n == len(ops)):
            steps(n, len(ops))
    return issued
