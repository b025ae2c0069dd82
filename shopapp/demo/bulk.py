"""A much larger demo history for benchmarks (e.g. 100 000 jobs and 1 000 000 runs)."""

from __future__ import annotations

import datetime as dt
import gc
from collections.abc import Iterator
from contextlib import contextmanager

from sqlalchemy.orm import Session

from shopapp.core.errors import ValidationFailed
from shopapp.demo.loader import DemoLoad, DemoSummary, Progress, Steps

LOAD_CACHE_KIB = 1024 * 1024  # SQLite page cache during the load (the 100 000-job shop ~1 GB)


def generate_bulk(
    session: Session,
    *,
    jobs: int,
    runs_per_job: int = 10,
    seed: int = 1,
    years: float = 2.0,
    end_date: dt.date | None = None,
    now: dt.datetime | None = None,
    force: bool = False,
    progress: Progress | None = None,
    steps: Steps | None = None,
) -> DemoSummary:
    """A large demo history for benchmarks: about ``jobs`` jobs and ``jobs·runs_per_job`` runs.

    Same shop and physics as :func:`shopapp.demo.loader.load_demo`, but
    corrections and verdicts come from the balancing core's batch forms
    (:func:`shopapp.balancing.influence.solve_two_plane_batch`,
    :func:`shopapp.balancing.tolerance.judge_residuals_batch`) instead of one
    validated call per step, jobs repeat their final run until they have
    ``runs_per_job`` runs (a repeatability record, as a shop keeps for the
    balance-error estimate), fleets grow with the job count, and no
    certificates, residual-unbalance tests or arbor jobs are made (the
    machines' proving tests are). Rows go in with bulk inserts in chunks
    (:mod:`shopapp.demo.store`); on SQLite two forked worker processes play the
    jobs, split by rotor type, while this one writes their rows
    (:mod:`shopapp.demo.parallel`; the same seed gives the same rows). The
    caller commits.
    """
    if jobs < 1:
        raise ValidationFailed("jobs", f"must be at least 1, got {jobs}")
    if runs_per_job < 4:
        raise ValidationFailed(
            "runs_per_job", f"must be at least 4 (initial, two trials, a check), got {runs_per_job}"
        )
    load = DemoLoad(session, seed=seed, years=years, now=now, end_date=end_date,
                    total_jobs=jobs, runs_per_job=runs_per_job, force=force, progress=progress,
                    steps=steps, exact=False, with_certificates=False,
                    signing_dir=None)
    conn = session.connection()
    sqlite = conn.dialect.name == "sqlite"
    if sqlite:
        # The whole uncommitted load stays in SQLite's page cache: with the default 2 MB
        # every index page is spilled and read back through the WAL again and again,
        # and the job facts' per-job lookups read from the WAL page by page (minutes at
        # 100 000 jobs). Only pages in use take memory; the setting is put back after.
        kept = conn.exec_driver_sql("PRAGMA cache_size").scalar()
        conn.exec_driver_sql(f"PRAGMA cache_size = {-LOAD_CACHE_KIB}")
    try:
        with _without_cycle_collection():
            load.shop_and_history()
    finally:
        if sqlite:
            conn.exec_driver_sql(f"PRAGMA cache_size = {int(kept)}")
    return load.summary()


@contextmanager
def _without_cycle_collection() -> Iterator[None]:
    """Python's cyclic garbage collector paused inside (reference counting still frees).

    The load keeps millions of live objects (rows waiting for their INSERT, each job's
    timeline, the influence sets) and allocates far more, so the collector's full passes
    walk an ever larger heap: a fifth of the serial simulation's time at 20 000 jobs, and
    more the longer the history. The forked workers inherit the pause. The few cycles the
    load leaves (about one small one per job) wait for the collector's next pass.
    """
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()
