"""Load the invented demo shop: :func:`load_demo`, or :class:`DemoLoad` step by step.

The shop of :mod:`shopapp.demo.scenario` with about two years of consistent
history ending at the moment the load starts (nothing is dated after it):
people and their logins, customers, rotor types, rotors, machines with
their verification register (:mod:`shopapp.demo.shop`), jobs whose every
number comes from simulated physics and the balancing core
(:mod:`shopapp.demo.physics`, :mod:`shopapp.demo.planning`,
:mod:`shopapp.demo.history`), then traceability records and certificates
through their services (:mod:`shopapp.demo.replay`).

:class:`DemoLoad` splits the work where a first start commits:
:meth:`DemoLoad.shop_and_history` (seconds: the logins work after it) and
:meth:`DemoLoad.certificates` in slices (minutes: a PDF per certificate).
Nothing here commits.

Nothing here is a real shop, company or person (see :mod:`shopapp.demo.scenario`).
"""

from __future__ import annotations

import datetime as dt
import random
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from sqlalchemy import func, select, text
from sqlalchemy.orm import Session

from shopapp.balancing.numtext import short
from shopapp.certificates import issue as cert_service
from shopapp.core.clock import shop_today
from shopapp.core.display import counted
from shopapp.core.errors import ValidationFailed
from shopapp.demo import physics as ph
from shopapp.demo.days import at
from shopapp.demo.history import History
from shopapp.demo.planning import RETURN_RATE, plan
from shopapp.demo.replay import DemoRefused, Replay, keep_shared_rows
from shopapp.demo.shop import Login, Shop
from shopapp.jobs import facts as job_facts
from shopapp.models import Customer, Job, Machine
from shopapp.models.base import utcnow

Progress = Callable[[str], object]
Steps = Callable[[int, int], object]

DEFAULT_JOBS_PER_YEAR = 320

__all__ = ["DEFAULT_JOBS_PER_YEAR", "DemoLoad", "DemoRefused", "DemoSummary", "Login",
           "demo_tag", "history_end", "load_demo"]


@dataclass
class DemoSummary:
    """What a load (or :func:`shopapp.demo.bulk.generate_bulk`) wrote."""

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


def history_end(now: dt.datetime | None = None, end_date: dt.date | None = None
                ) -> dt.datetime:
    """The last moment of the history, in whole UTC seconds.

    ``now`` (default: the current time) — the moment the load starts; with
    ``end_date`` the end of that day, unless that is later than ``now``.
    """
    if now is not None and (not isinstance(now, dt.datetime) or now.tzinfo is None):
        raise ValidationFailed("now", "must be a date and time with its time zone")
    current = (now or utcnow()).astimezone(dt.UTC).replace(microsecond=0)
    if end_date is None:
        if now is not None:
            return current
        # The demo's days are UTC days of its moments: in a shop west of Greenwich, in the
        # evening, the UTC day is already the shop's tomorrow. End with the shop's today.
        end_date = shop_today()
    return min(current, at(end_date, 24 * 60) - dt.timedelta(seconds=1))


class DemoLoad:
    """One load of the demo shop, in the steps a first start commits apart.

    Parameters
    ----------
    session : Session
        Rows are added and flushed; the caller commits.
    seed : int
        Same seed and end, same shop and history (passwords are random each time).
    years : float
        Length of the history; 0 < years <= 10.
    now, end_date
        The end of the history (:func:`history_end`): jobs still open then stay open.
    jobs_per_year : int, optional
        New jobs per year (default 320, so two years give 600+ jobs with returns).
    total_jobs, runs_per_job
        Bulk mode (:func:`shopapp.demo.bulk.generate_bulk`).
    force : bool
        Load even when the database already has customers or jobs: the demo
        shop is *added* beside them under distinct names ("… [demo 2]");
        nothing existing is changed or deleted.
    progress : callable(str), optional
        Receives a few phase messages ("demo: simulating 640 jobs", …).
    steps : callable(done, total), optional
        Called as jobs are simulated and certificates issued, for a progress bar.
    exact : bool
        The balancing core's per-call functions (the demo) or their batch forms (bulk).
    with_certificates : bool
        Certificates for the certified and dispatched jobs (PDFs; the slowest part).
    signing_dir : Path or None
        The instance's signing folder
        (:func:`shopapp.certificates.signing.signing_folder`): the certificates are
        signed with the shop key there (made at the first one). None signs nothing
        (only for tests that stub the PDF); the commands always pass the folder.
    base_url : str
        The shop's ``BASE_URL``, printed in each certificate's verify address and QR
        code ("" prints the path only, no QR code).

    Raises
    ------
    DemoRefused
        The database holds customers or jobs and ``force`` is not set.
    ValidationFailed
        ``years`` out of range, ``now`` without a time zone, ``base_url`` not a web
        address.
    """

    def __init__(self, session: Session, *, seed: int = 1, years: float = 2.0,
                 now: dt.datetime | None = None, end_date: dt.date | None = None,
                 jobs_per_year: int | None = None, total_jobs: int | None = None,
                 runs_per_job: int | None = None, force: bool = False,
                 progress: Progress | None = None, steps: Steps | None = None,
                 exact: bool = True, with_certificates: bool = True,
                 signing_dir: Path | None, base_url: str = "") -> None:
        self.t0 = time.perf_counter()
        if not (0 < years <= 10):
            raise ValidationFailed("years",
                                   f"must be more than 0 and at most 10, got {short(years)}")
        self.base_url = cert_service.public_base(base_url)  # refused now, not at job 1
        self.signing_dir = signing_dir
        self.session = session
        self.end_at = history_end(now, end_date)
        self.say = progress or (lambda _msg: None)
        self.steps = steps
        tag = demo_tag(session, force)
        start = self.end_at.date() - dt.timedelta(days=round(365.25 * years))
        if total_jobs is not None:
            self.n_new = max(1, round(total_jobs / (1.0 + RETURN_RATE)))
        else:
            self.n_new = max(1, round((jobs_per_year or DEFAULT_JOBS_PER_YEAR) * years))
        rng = random.Random(seed)
        self.shop = Shop(session, rng=rng, start=start, end_at=self.end_at, tag=tag,
                         exact=exact, fleet_scale=max(1.0, self.n_new / 640.0))
        self.history = History(self.shop, solver=ph.Solver(exact), runs_per_job=runs_per_job,
                               with_certificates=with_certificates)
        self.replay: Replay | None = None
        self.logins: list[Login] = []
        self._keep: list[object] = []

    def shop_and_history(self) -> list[Login]:
        """The shop, its jobs and their traceability records (flushed); the logins."""
        logins = self.people_and_machines()
        self.history_rows()
        return logins

    def people_and_machines(self) -> list[Login]:
        """The shop's people, machines, customers and rotors (flushed); the logins.

        A first start commits this step on its own, so the logins are printed within
        seconds, before the jobs are simulated.
        """
        shop = self.shop
        self.say(f"demo: setting up {shop.shop_name} ({shop.start.isoformat()} to "
                 f"{self.end_at.isoformat(sep=' ')})")
        self.logins = shop.setup()
        return self.logins

    def history_rows(self) -> None:
        """The jobs, their runs and traceability records and the job facts (flushed); after
        :meth:`people_and_machines`."""
        shop = self.shop
        self.say(f"demo: planning about {self.n_new} jobs")
        plans = plan(shop, self.n_new, self.history.runs_per_job)
        self.say(f"demo: simulating {len(plans)} jobs on the balancing machines")
        self.history.simulate(plans, self.steps)
        self.say("demo: writing rows")
        self.history.write()
        self.say("demo: traceability records")
        self._keep = keep_shared_rows(self.session)
        self.replay = Replay(self.session, shop, self.history, signing_dir=self.signing_dir,
                             base_url=self.base_url)
        self.replay.evidence()
        # The rows above went in as bulk inserts, past the flush hook that keeps job facts.
        self.say("demo: job facts for the shop measures")
        if not shop.exact:
            # Without statistics on a freshly filled table SQLite reads the facts'
            # transition subqueries through the to_state index (every job's "on_machine"
            # rows for each job: quadratic, 78 s for 10 000 jobs); with them, job_id.
            self.session.execute(text("ANALYZE job_transition"))
        job_facts.rebuild(self.session)

    @property
    def certificates_total(self) -> int:
        return len(self.replay.cert_ops) if self.replay else 0

    @property
    def certificates_remaining(self) -> int:
        return self.replay.remaining if self.replay else 0

    def certificates(self, *, seconds: float | None = None) -> int:
        """Certificate operations from where the last call stopped (:meth:`Replay.certificates`).

        Returns how many were written; after committing them call :meth:`advance`.
        """
        assert self.replay is not None, "shop_and_history() first"
        if self.replay.done == 0:
            self.say(f"demo: certificates for {len(self.history.cert_jobs)} jobs")
        return self.replay.certificates(seconds=seconds, steps=self.steps)

    def advance(self, n: int) -> None:
        assert self.replay is not None
        self.replay.advance(n)

    @property
    def skipped(self) -> dict[int, str]:
        """Jobs a person changed while their certificates were still to come (id → number)."""
        return self.replay.skipped if self.replay else {}

    def summary(self) -> DemoSummary:
        store = self.shop.store
        by_state: dict[str, int] = {}
        for state in store.job_states:
            by_state[state] = by_state.get(state, 0) + 1
        c = store.counts
        out = DemoSummary(
            logins=self.logins, jobs=c["jobs"], runs=c["runs"], readings=c["readings"],
            corrections=c["corrections"], transitions=c["transitions"],
            audit_events=c["audits"], certificates=self.replay.issued if self.replay else 0,
            influence_sets=c["sets"], seconds=time.perf_counter() - self.t0, by_state=by_state)
        self.say(f"demo: {out.jobs} jobs, {out.runs} runs, {out.certificates} certificates "
                 f"in {out.seconds:.0f} s")
        return out


def load_demo(
    session: Session,
    *,
    seed: int = 1,
    years: float = 2.0,
    progress: Progress | None = None,
    end_date: dt.date | None = None,
    now: dt.datetime | None = None,
    jobs_per_year: int | None = None,
    force: bool = False,
    steps: Steps | None = None,
    certificates: bool = True,
    signing_dir: Path | None,
    base_url: str = "",
) -> list[Login]:
    """Load the whole demo shop in the caller's transaction; return its logins.

    The parameters are :class:`DemoLoad`'s; ``certificates=False`` skips the
    certificate PDFs (much faster).
    """
    load = DemoLoad(session, seed=seed, years=years, now=now, end_date=end_date,
                    jobs_per_year=jobs_per_year, force=force, progress=progress, steps=steps,
                    with_certificates=certificates, signing_dir=signing_dir,
                    base_url=base_url)
    logins = load.shop_and_history()
    if certificates:
        load.advance(load.certificates())
    load.summary()
    return logins


def demo_tag(session: Session, force: bool) -> str:
    """"" for an empty shop; with ``force`` a suffix no earlier demo used ("[demo 2]" …).

    Raises :class:`DemoRefused` for a shop with customers or jobs without ``force``.
    """
    has_customers = session.scalar(select(func.count()).select_from(Customer)) or 0
    has_jobs = session.scalar(select(func.count()).select_from(Job)) or 0
    if not (has_customers or has_jobs):
        return ""
    if not force:
        raise DemoRefused(
            f"the database already holds {counted(has_customers, 'customer')} and "
            f"{counted(has_jobs, 'job')}; "
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
