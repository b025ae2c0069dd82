"""The demo shop: an invented balancing shop with about two years of consistent history.

:func:`load_demo` fills an empty database with the shop of
:mod:`shopapp.services.demo_scenario` (users, customers, rotor types, rotors,
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
  :mod:`shopapp.services.job_calc` would compute it from the same rows;
- the operator fits the advice rounded to the weights in stock, split onto
  blades or holes, or drilled, with a hidden fitting error, so some jobs need
  several correction cycles; every check run is judged by
  :func:`shopapp.balancing.tolerance.judge_residual` against the job's
  tolerance (:func:`shopapp.services.job_calc.job_tolerance`), and a job
  reaches ``in_tolerance`` only when that verdict passes.

Around the physics: working-day dates (received, promised, dispatched),
reopened jobs with reasons, customer returns linked to the earlier job,
rejections with reasons, jobs still in progress at the end date, one machine
due for verification soon and one that was overdue for a while (its jobs of
that period were checked again after re-verification), learned influence
sets, a JobTransition row for every state change, AuditEvent rows for every
action, and certificates (some reissued, some void).

:func:`generate_bulk` builds a much larger history (e.g. 100 000 jobs and
1 000 000 runs) for benchmarks with the same model, closed-form 2×2 algebra
instead of the core's validated per-call functions, and no certificates.
Rows are written with SQLAlchemy Core bulk inserts in chunks.

Nothing here is a real shop, company or person (see ``demo_scenario``).
"""

from __future__ import annotations

import bisect
import cmath
import dataclasses
import datetime as dt
import hashlib
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
from sqlalchemy import JSON, Boolean, Date, DateTime, func, insert, select, text
from sqlalchemy.orm import Session, selectinload

from shopapp.balancing import influence, positions, removal, tolerance, verification
from shopapp.balancing.phasors import amplitude_angle, normalize_deg
from shopapp.balancing.planes import transfer_matrix
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
from shopapp.services import demo_scenario as sc
from shopapp.services import job_calc
from shopapp.services.errors import ServiceError, ValidationFailed
from shopapp.services.numbering import DEFAULT_PATTERN, format_number, per_year
from shopapp.services.users import hash_password

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
    certificates are issued. About 100 000 jobs / 1 000 000 runs take a few
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
                     fleet_scale=max(1.0, n_new / 640.0))
    say(f"demo: setting up {gen.shop_name} ({start.isoformat()} to {end.isoformat()})")
    logins = gen.setup()
    say(f"demo: planning about {n_new} jobs")
    plans = gen.plan(n_new)
    say(f"demo: simulating {len(plans)} jobs on the balancing machines")
    gen.simulate(plans, steps)
    say("demo: writing rows")
    gen.write(steps)
    n_certs = 0
    if with_certificates and gen.cert_events:
        say(f"demo: issuing certificates for {len(gen.cert_jobs)} jobs")
        n_certs = _issue_certificates(session, gen, steps)
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
                 tag: str, solver: _Solver, runs_per_job: int | None, fleet_scale: float
                 ) -> None:
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
        self.cert_events: list[tuple[dt.datetime, int, str, dict[str, Any]]] = []
        self.cert_jobs: set[int] = set()
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
        """Proving-rotor tests through the period, shaped by each machine's ``history``."""
        rows = []
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
            for day in sorted(set(dates)):
                rows.append(self._verification_row(mm, day))
        self._insert(MachineVerification, rows)

    def _verification_row(self, mm: _MachineModel, day: dt.date) -> dict[str, Any]:
        """A passing proving-rotor test, evaluated by :mod:`shopapp.balancing.verification`."""
        rng = self.rng
        m = mm.spec
        claimed = m.claimed_emar_gmm_per_kg * m.proving_rotor_mass_kg
        test = 10.0 * claimed
        residual = _rect(claimed * rng.uniform(0.2, 0.7), rng.uniform(0, 360))
        pos = [45.0 * k for k in range(8)]
        amps, angs = [], []
        for p in pos:
            z = (residual + _rect(test, p)) * (1.0 + rng.gauss(0, 0.004))
            z += complex(rng.gauss(0, 0.01 * claimed), rng.gauss(0, 0.01 * claimed))
            a, g = amplitude_angle(z)
            amps.append(round(a, 2))
            angs.append(round(g, 1) % 360.0)
        fit = verification.minimum_achievable_residual(
            test, pos, amps, angs, claimed_umar_gmm=claimed, rotor_mass_kg=m.proving_rotor_mass_kg
        )
        before = [round(20.0 * claimed * rng.uniform(0.8, 1.2), 1) for _ in range(2)]
        reduction = [min(99.5, m.claimed_urr_pct + rng.uniform(1.0, 6.0)) for _ in range(2)]
        after = [round(b * (1.0 - r / 100.0), 2) for b, r in zip(before, reduction, strict=True)]
        urr = verification.unbalance_reduction_ratio(before, after,
                                                     claimed_urr_percent=m.claimed_urr_pct)
        return {
            "id": self.ids.take(MachineVerification), "machine_id": mm.id, "performed_on": day,
            "proving_rotor": m.proving_rotor, "proving_rotor_mass_kg": m.proving_rotor_mass_kg,
            "measured_umar_gmm": fit.umar_gmm, "urr_pct": urr.min_urr_percent,
            "passed": bool(fit.passed and urr.passed),
            "readings": {"test_unbalance_gmm": test, "positions_deg": pos,
                         "indicated_gmm": amps, "indicated_angles_deg": angs,
                         "urr_before_gmm": before, "urr_after_gmm": after},
            "performed_by_id": self.quality_id, "notes": "demo proving-rotor test",
            "created_at": _at(day, 15 * 60),
        }

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

    # ---------------------------------------------------------------- physics helpers

    def tick(self, lo: float, hi: float) -> dt.datetime:
        self.clock = self.clock + dt.timedelta(seconds=round(self.rng.uniform(lo, hi) * 60))
        return self.clock

    def measure(self, u: Pair) -> tuple[tuple[float, float], tuple[float, float]]:
        """The machine display for true unbalance ``u`` (grams at R): noisy, rounded."""
        a = self.p.rotor.a_true
        rng = self.rng
        out = []
        for v in (a[0] * u[0] + a[1] * u[1], a[2] * u[0] + a[3] * u[1]):
            sigma = 0.006 * abs(v) + self.tm.noise_abs
            v = v + complex(rng.gauss(0, sigma), rng.gauss(0, sigma))
            amp, ang = amplitude_angle(v)
            amp = round(amp, self.tm.decimals)
            out.append((amp, float(round(ang) % 360) if amp > 0 else 0.0))
        return out[0], out[1]

    @staticmethod
    def phasors(reading: tuple[tuple[float, float], tuple[float, float]]) -> Pair:
        return _rect(*reading[0]), _rect(*reading[1])

    def residual(self, reading: tuple[tuple[float, float], tuple[float, float]]) -> Pair:
        return self.solver.unbalance_gmm(self.a_est if not self.tm.calibrated else None,
                                         self.phasors(reading), self.tm.radii)

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
            v = self.phasors(self.runs[answering]["reading"])
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
        err = job_calc.prediction_error_pct(
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
        if not ok:
            self.tick(5, 20)
            self.tr(self.clock, "on_machine", "rejected", sc.REJECT_ON_MACHINE[1],
                    action="reject")
            self.emit()
            return
        self.tick(1, 4)
        self.tr(self.clock, "on_machine", "in_tolerance", action="in_tolerance")
        if self.source == "trials" and not self.g.sets.get(self.set_key()):
            # One stored set per rotor type, machine and speed: the page of an older job
            # picks the newest set, so a second set would change its verdict afterwards.
            self.learn()
        if p.reopen == "overdue":
            self.reopen_overdue(u)
        else:
            u = self.certify_and_dispatch(u)
        self.emit()

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
        self.day_at(day, 60, 480)
        self.tr(self.clock, "in_tolerance", "certified", by=self.g.quality_id,
                action="certified")
        self.events.append(_Event(self.clock, "cert", {"what": "issue"}))

    def dispatch(self, day: dt.date) -> None:
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
        for e in events:
            last_at = max(last_at, e.at)
            if e.kind == "tr":
                d = e.data
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
                g.cert_events.append((e.at, job_id, e.data["what"], dict(e.data)))
                g.cert_jobs.add(job_id)
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
            "residual_test_required": g.requires_test[tm.customer_id],
            "reopen_count": reopen_count, "reject_reason": reject_reason, "notes": p.notes,
            "created_at": p.booked_at, "updated_at": last_at,
        })


# --------------------------------------------------------------------------- certificates


def _issue_certificates(session: Session, gen: _Generator, steps: Steps | None) -> int:
    """Certificates for the demo's certified and dispatched jobs, dated as they happened.

    Uses :mod:`shopapp.services.certificates` (its evidence rules and
    :func:`~shopapp.services.certificates.build_data`) and
    :func:`shopapp.reports.certificate.render`, so every certificate is one
    the service would issue for the job's data at that moment; only the issue
    time is the historical one instead of now. Skipped (returns 0) when the
    certificates service is not installed. Revisions: a reopened certified
    job voids its certificate and is certified again under the same number;
    a few are reissued for a corrected order reference. The PDFs are rendered
    one by one (rendering is most of the time, about 0.2 s each).
    """
    try:
        from shopapp.reports import certificate as report
        from shopapp.services import certificates as cert_service
    except ImportError:
        return 0
    quality = session.get(User, gen.quality_id)
    assert quality is not None
    events = sorted(gen.cert_events, key=lambda e: (e[0], e[1]))
    reissued = {job_id for _at, job_id, what, _d in events if what == "reissue"}
    n_ops = len(events) + sum(1 for e in events if e[2] == "reissue")
    year_seq: dict[int, int] = {}
    numbers: dict[int, str] = {}
    revision: dict[int, int] = {}
    # 1. the certified data of every revision, in the order things happened
    ops: list[tuple[str, dt.datetime, int, Any]] = []
    for at, job_id, what, data in events:
        job = session.get(Job, job_id)
        assert job is not None
        if what == "void":
            ops.append(("void", at, job_id, f"job reopened: {data['reason']}"))
            continue
        if job_id not in numbers:
            year = at.year
            if year not in year_seq:
                nxt = cert_service.next_number(session, year)
                year_seq[year] = int(nxt.rsplit("-", 1)[1]) - 1
            year_seq[year] += 1
            numbers[job_id] = f"{cert_service.NUMBER_PREFIX}-{year:04d}-{year_seq[year]:05d}"
            revision[job_id], reason = 1, ""
        else:
            revision[job_id] += 1
            reason = data["reason"] if what == "reissue" else (
                f"issued again after the job was reopened; revision {revision[job_id] - 1} "
                "was voided")
        ev = _evidence_at(session, cert_service, job, at)
        built = cert_service.build_data(session, ev, number=numbers[job_id],
                                        revision=revision[job_id], reason=reason, issued_at=at,
                                        issued_by=quality)
        if revision[job_id] == 1 and job_id in reissued:
            # The first copy carried the customer's order reference mistyped.
            built = report.normalized(dataclasses.replace(
                built, customer_order_ref=built.customer_order_ref[:-1] + "0"))
        if what == "reissue":
            ops.append(("void", at, job_id, f"superseded by revision {revision[job_id]}"))
        ops.append((what, at, job_id, built))
        if steps is not None and len(ops) % 25 == 0:
            steps(len(ops), 2 * n_ops)
    # 2. the PDFs (most of the time: ~0.2 s each; worker processes were tried, but a spawned
    # worker re-imports the caller's main script, which is not safe for every caller)
    pdfs = []
    for n, op in enumerate(ops, start=1):
        if op[0] != "void":
            pdfs.append(report.render(op[3]))
        if steps is not None and n % 25 == 0:
            steps(n_ops + n, 2 * n_ops)
    # 3. the rows, voiding as they happened (the only change the database allows)
    latest: dict[int, Certificate] = {}
    k = 0
    for what, at, job_id, payload in ops:
        if what == "void":
            prev = latest.get(job_id)
            if prev is not None and prev.state == "issued":
                _void_certificate(session, gen, prev, at, quality.id, payload)
            continue
        cert = _store_certificate(session, report, payload, pdfs[k], job_id, quality.id, at)
        k += 1
        latest[job_id] = cert
        gen._audit(at, quality.id, "certificate", cert.id, what, after=_cert_summary(cert),
                   job_id=job_id)
    if steps is not None:
        steps(2 * n_ops, 2 * n_ops)
    gen.flush_rows()
    _move_sequences(session)
    return k


def _evidence_at(session: Session, cert_service: Any, job: Job, at: dt.datetime) -> Any:
    """The service's evidence for ``job`` from the runs and corrections made up to ``at``.

    The same checks as :func:`shopapp.services.certificates.evidence`, on the
    job as it stood when the certificate was issued (a later reopening added
    runs that the earlier revision did not certify).
    """
    runs = [r for r in session.scalars(
        select(Run).where(Run.job_id == job.id, Run.taken_at <= at)
        .options(selectinload(Run.readings)).order_by(Run.seq))]
    corrections = list(session.scalars(
        select(Correction).where(Correction.job_id == job.id, Correction.applied_at <= at)
        .order_by(Correction.id)))
    calc = job_calc.evaluate(job, runs=runs, corrections=corrections,
                             influence_sets=_sets_of(session, job))
    final = calc.last_check
    if final is None or not final.judged or not final.passed:
        raise DemoRefused(f"demo job {job.number}: no passing check run before {at}")
    by_id = {r.id: r for r in runs}
    final_run = by_id[final.run_id]
    initial_run = next((r for r in runs if r.purpose == "initial"), None)
    initial = calc.verdicts.get(initial_run.id) if initial_run is not None else None
    assert job.machine is not None
    status = cert_service.machine_status(session, job.machine,
                                         final_run.taken_at.astimezone(dt.UTC).date())
    if not status.allows_certificate:
        raise DemoRefused(f"demo job {job.number}: {status.refusal()}")
    return cert_service.JobEvidence(job, calc, tuple(runs), tuple(corrections), final_run, final,
                                    initial_run, initial, job.machine, status)


def _sets_of(session: Session, job: Job) -> list[InfluenceSet]:
    return list(session.scalars(select(InfluenceSet).where(
        InfluenceSet.rotor_type_id == job.rotor.rotor_type_id,
        InfluenceSet.machine_id == job.machine_id)))


def _store_certificate(session: Session, report: Any, data: Any, pdf: bytes, job_id: int,
                       by_id: int, at: dt.datetime) -> Certificate:
    """The row the certificates service stores, with the historical issue time."""
    canonical = report.canonical_json(data)
    cert = Certificate(number=data.number, revision=data.revision, job_id=job_id,
                       state="issued", issued_by_id=by_id, issued_at=at,
                       reason=data.revision_reason, pdf=pdf,
                       pdf_sha256=hashlib.sha256(pdf).hexdigest(), data_json=canonical,
                       data_sha256=hashlib.sha256(canonical.encode("utf-8")).hexdigest())
    session.add(cert)
    session.flush()
    return cert


def _void_certificate(session: Session, gen: _Generator, cert: Certificate, at: dt.datetime,
                      by_id: int, reason: str) -> None:
    before = _cert_summary(cert)
    cert.state = "void"
    cert.voided_at = at
    cert.voided_by_id = by_id
    cert.void_reason = reason
    session.flush()
    gen._audit(at, by_id, "certificate", cert.id, "void", before=before,
               after=_cert_summary(cert), job_id=cert.job_id)


def _cert_summary(cert: Certificate) -> dict[str, Any]:
    return {"number": cert.number, "revision": cert.revision, "state": cert.state,
            "pdf_sha256": cert.pdf_sha256, "data_sha256": cert.data_sha256,
            "reason": cert.reason, "void_reason": cert.void_reason}
