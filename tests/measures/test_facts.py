"""Per-job facts (shopapp.jobs.facts) against the raw rows they are kept from.

The reference is the measures' SQL as it was before the facts
(tests/measures/raw_reference.py: the same definitions, aggregating job, run, reading,
correction and transition rows on every call). On a generated demo shop both must give
the same figures for every slice, the same rotors getting worse and the same drift
visits; facts kept by the flush hook must equal facts rebuilt from scratch.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

import pytest
from sqlalchemy import select

from shopapp.demo.bulk import generate_bulk
from shopapp.jobs import facts
from shopapp.jobs.states import reopen
from shopapp.measures import drift, figures, lists
from shopapp.measures.periods import EVERYTHING, Period, Scope
from shopapp.models import Job, JobFact, JobTransition, Run, RunReading
from tests import measures_shop
from tests.measures import raw_reference as raw

END = dt.date(2026, 10, 30)
DIMS = ["all", "operator", "machine", "rotor_type", "customer", "month"]


@pytest.fixture()
def generated(db):  # type: ignore[no-untyped-def]
    summary = generate_bulk(db, jobs=240, runs_per_job=5, years=1.5, end_date=END, seed=3)
    db.flush()
    return summary


def _raw_figures(db: Any, p: Period, scope: Scope, as_of: dt.date, today: dt.date) -> Any:
    return figures._merge([
        raw._received(db, p, scope, DIMS),
        raw._dispatched(db, p, scope, DIMS),
        raw._wip(db, p, scope, DIMS, as_of),
        raw._tolerance_cohort(db, p, scope, DIMS, today),
        raw._closed(db, p, scope, DIMS),
    ])


def _periods() -> list[Period]:
    months = [Period.month(y, m) for y in (2025, 2026) for m in range(1, 13)
              if dt.date(y, m, 1) <= END]
    return [*months, Period.containing("year", dt.date(2025, 6, 1)),
            Period(dt.date(2025, 3, 17), dt.date(2026, 2, 3))]


def test_figures_from_facts_equal_the_raw_sql_for_every_slice(db, generated) -> None:  # type: ignore[no-untyped-def]
    # Reference: the pre-facts SQL over the raw rows (raw_reference.py), same shop.
    today = END
    checked = 0
    for p in _periods():
        as_of = min(p.end, today)
        new = figures.figures_for(db, p, EVERYTHING, DIMS, as_of, today=today)
        old = _raw_figures(db, p, EVERYTHING, as_of, today)
        assert new.keys() == old.keys(), p
        for key in old:
            assert new[key].as_dict() == pytest.approx(old[key].as_dict(), nan_ok=True), (p, key)
        checked += len(old)
    assert checked > 300  # the shop has work in every month and every slice


def test_scoped_figures_and_lists_from_facts_equal_the_raw_sql(db, generated) -> None:  # type: ignore[no-untyped-def]
    job = db.scalars(select(Job).where(Job.machine_id.is_not(None)).limit(1)).one()
    scopes = [EVERYTHING, Scope(machine_id=job.machine_id), Scope(customer_id=job.customer_id),
              Scope(operator_id=job.operator_id)]
    found_worse = found_drift = 0
    for scope in scopes:
        for p in _periods():
            as_of = min(p.end, END)
            new = figures.figures_for(db, p, scope, ["all"], as_of, today=END)
            old = _raw_figures(db, p, scope, as_of, END)
            whole = ("all", None)
            assert (whole in new) == (whole in old), (p, scope)
            if whole in old:
                assert new[whole].as_dict() == pytest.approx(old[whole].as_dict()), (p, scope)
            for visits in (2, 3):
                worse = lists.rotors_getting_worse(db, p, scope, visits=visits)
                assert worse == raw.rotors_getting_worse(db, p, scope, visits=visits)
                found_worse += len(worse)
            new_rows = [tuple(r) for r in drift._visit_rows(db, p, scope)]
            old_rows = [tuple(r) for r in raw._visit_rows(db, p, scope)]
            assert new_rows == old_rows, (p, scope)
            found_drift += len(new_rows)
    assert found_worse > 0 and found_drift > 0  # the comparison saw real rows


def _snapshot(db: Any) -> list[tuple[Any, ...]]:
    cols = list(JobFact.__table__.c)
    return [tuple(r) for r in db.execute(select(*cols).order_by(JobFact.job_id))]


def test_facts_kept_by_each_change_equal_facts_rebuilt_from_scratch(db, shop, make_user) -> None:  # type: ignore[no-untyped-def]
    # The hand shop of tests/measures is written row by row through the ORM: the flush
    # hook keeps the facts. Then a reopening through the use-case, a run's verdict
    # changed, a reading added and a customer return booked.
    hs = measures_shop.build(db, shop, make_user)
    done = next(j for j in hs.jobs.values() if j.state == "dispatched")
    reopen(db, done, by=hs.users["A"], reason="weight found loose")
    run = db.scalars(select(Run).where(Run.purpose == "check")).first()
    run.within_tolerance = not run.within_tolerance
    first = db.scalars(select(Run).join(RunReading, RunReading.run_id == Run.id)
                       .where(Run.purpose == "initial", RunReading.plane == 2)).first()
    reading = db.scalars(select(RunReading).where(RunReading.run_id == first.id,
                                                  RunReading.plane == 2)).one()
    reading.amplitude = 999.0
    earlier = next(j for j in hs.jobs.values() if j.first_in_tolerance_at is not None
                   and j.id != done.id)
    shop.job(earlier.rotor, kind="return", return_of_job_id=earlier.id,
             received_on=earlier.received_on + dt.timedelta(days=20))
    db.flush()
    kept = _snapshot(db)
    assert facts.rebuild(db) == len(kept) == len(db.scalars(select(Job.id)).all())
    assert _snapshot(db) == kept
    # ... and the changes did reach the facts:
    f = db.get(JobFact, done.id)
    db.refresh(f)
    assert f.first_reopen_at is not None
    assert db.get(JobFact, earlier.id).first_return_on == earlier.received_on + dt.timedelta(
        days=20)
    assert db.get(JobFact, first.job_id).initial_amplitude_2 == 999.0


def test_a_deleted_transition_leaves_the_facts(db, shop, make_user) -> None:  # type: ignore[no-untyped-def]
    hs = measures_shop.build(db, shop, make_user)
    t = db.scalars(select(JobTransition).where(JobTransition.to_state == "rejected")).first()
    assert t is not None
    assert db.get(JobFact, t.job_id).rejected_at is not None
    db.delete(t)
    db.flush()
    db.expire_all()
    assert db.get(JobFact, t.job_id).rejected_at is None
    assert hs.jobs  # built
