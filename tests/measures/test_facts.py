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
from shopapp.measures import costs, drift, figures, lists
from shopapp.measures.periods import EVERYTHING, Period, Scope
from shopapp.measures.stats import machine_time
from shopapp.models import Job, JobFact, JobTransition, Run, RunFact, RunReading
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


def _run_snapshot(db: Any) -> list[tuple[Any, ...]]:
    cols = list(RunFact.__table__.c)
    return [tuple(r) for r in db.execute(select(*cols).order_by(RunFact.run_id))]


def _python_machine_seconds(db: Any, p: Period, scope: Scope, idle_s: float
                            ) -> dict[tuple[str, str | None, str], tuple[int, int]]:
    """Machine time by the definition (shopapp.measures.costs) with stats.machine_time as
    the arithmetic, each job's runs loaded into Python: runs cut into segments at the
    job's reopenings (a reopening before a run at the same moment), the gap before a run
    belongs to the run's UTC day. Keyed like costs.machine_seconds for "all" and "reason"."""
    start = dt.datetime.combine(p.start, dt.time(0), tzinfo=dt.UTC)
    stop = dt.datetime.combine(p.end + dt.timedelta(days=1), dt.time(0), tzinfo=dt.UTC)
    jobs = db.scalars(select(Job).where(Job.id.in_(
        select(Run.job_id).where(Run.taken_at >= start, Run.taken_at < stop,
                                 Run.struck_at.is_(None))))).all()
    secs: dict[tuple[str, str | None, str], float] = {}
    seen: dict[tuple[str, str | None, str], set[int]] = {}
    for job in jobs:
        if any(getattr(job, f"{k}_id") != getattr(scope, f"{k}_id")
               for k in ("operator", "machine", "customer")
               if getattr(scope, f"{k}_id") is not None):
            continue
        runs = db.execute(select(Run.taken_at, Run.id).where(
            Run.job_id == job.id, Run.struck_at.is_(None))).all()
        reopens = db.execute(select(JobTransition.at, JobTransition.reason).where(
            JobTransition.job_id == job.id, JobTransition.to_state == "on_machine",
            JobTransition.from_state.in_(facts.REWORK_FROM_STATES))
            .order_by(JobTransition.at, JobTransition.id)).all()
        segments: dict[int, list[tuple[dt.datetime, int]]] = {}
        for taken, run_id in runs:
            seg = sum(1 for at, _r in reopens if at <= taken)
            segments.setdefault(seg, []).append((taken, run_id))
        for seg, items in segments.items():
            items.sort()
            times = [t.replace(microsecond=0) for t, _i in items]
            if seg > 0:
                text = reopens[seg - 1][1].strip() or facts.NO_REASON
            elif job.kind == "return":
                note = (job.notes or "").strip()
                text = f"{facts.RETURN_REASON}: {note[:80]}" if note else facts.RETURN_REASON
            else:
                text = ""
            phase = "rework" if text else "first"
            for i, t in enumerate(times):
                if not start <= t < stop:
                    continue
                gap = machine_time(times[i - 1:i + 1], idle_s).seconds if i else 0.0
                for key in (("all", None, phase), *((("reason", text, phase),) if text else ())):
                    secs[key] = secs.get(key, 0.0) + gap
                    seen.setdefault(key, set()).add(job.id)
    return {k: (round(v), len(seen[k])) for k, v in secs.items()}


def test_machine_time_from_run_facts_equals_the_definition_in_python(db, generated) -> None:  # type: ignore[no-untyped-def]
    # Reference: the definition worked out per job in Python (stats.machine_time over
    # each segment's runs), on the generated shop with its reopenings and returns.
    job = db.scalars(select(Job).where(Job.operator_id.is_not(None)).limit(1)).one()
    compared = 0
    for scope in (EVERYTHING, Scope(operator_id=job.operator_id)):
        for p in (Period.month(2025, 11), Period.containing("year", dt.date(2025, 6, 1)),
                  Period(dt.date(2025, 3, 17), dt.date(2026, 2, 3))):
            for idle_s in (1800, 600):
                got = costs.machine_seconds(db, p, scope, idle_seconds=idle_s,
                                            dims=("all", "reason"))
                want = _python_machine_seconds(db, p, scope, idle_s)
                assert got == want, (p, scope, idle_s)
                compared += sum(v[0] for v in want.values())
    assert compared > 0
    assert any(k[0] == "reason" for k in want)  # the shop has rework time with reasons


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
    # Run facts: a run struck out, a run after the reopening, the return's note changed.
    struck = db.scalars(select(Run).where(Run.purpose == "trial")).first()
    struck.struck_at = measures_shop.at("2026-10-20")
    struck.struck_by_id = hs.users["A"].id
    struck.struck_reason = "wrong plane logged"
    after = Run(job_id=done.id, seq=99, purpose="check", speed_rpm=600.0,
                within_tolerance=True, taken_at=dt.datetime.now(dt.UTC), by_id=hs.users["A"].id)
    db.add(after)
    returned = db.scalars(select(Job).where(Job.kind == "return")).first()
    returned.notes = "  rubbing noise after fitting  "
    db.flush()
    kept = _snapshot(db)
    kept_runs = _run_snapshot(db)
    assert facts.rebuild(db) == len(kept) == len(db.scalars(select(Job.id)).all())
    assert _snapshot(db) == kept
    assert _run_snapshot(db) == kept_runs
    assert db.get(RunFact, struck.id) is None
    assert len(kept_runs) == len(db.scalars(select(Run.id).where(Run.struck_at.is_(None))).all())
    fact = db.get(RunFact, after.id)
    assert (fact.rework, fact.reason) == (1, "weight found loose")
    assert {f.reason for f in db.scalars(select(RunFact).where(
        RunFact.job_id == returned.id))} == {"customer return: rubbing noise after fitting"}
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


def _drift_by_definition(db: Any, p: Period, scope: Scope) -> dict[str, tuple[float, float]]:
    """Rising rotors by the definition in shopapp.measures.drift, one rotor at a time:
    visits from the raw rows (raw_reference.py), limits from each job's own tolerance
    (job_calc.job_tolerance on the stored Job), the line from scipy.stats.linregress."""
    from collections import defaultdict

    import scipy.stats

    from shopapp.jobs import calc as job_calc

    by_rotor: dict[int, list[Any]] = defaultdict(list)
    for row in raw._visit_rows(db, p, scope):
        by_rotor[row.rotor_id].append(row)
    out: dict[str, tuple[float, float]] = {}
    for rows in by_rotor.values():
        points = []  # (day, unit, largest reading, % of limit or None)
        for r in rows:
            amp = max(a for a in (r.amp1, r.amp2) if a is not None)
            pct = None
            if r.unit == r.unit_max == "g·mm":
                job = db.get(Job, r.job_id)
                limits = job_calc.job_tolerance(job, job.rotor.rotor_type).plane_limits_gmm
                shares = [100 * a / lim for a, lim in zip((r.amp1, r.amp2), limits,
                                                          strict=False)
                          if a is not None and lim > 0]
                pct = max(shares) if shares else None
            unit = r.unit if r.unit == r.unit_max else "mixed"
            day = (dt.date.fromisoformat(r.received_on) if isinstance(r.received_on, str)
                   else r.received_on).toordinal()
            points.append((day, unit, amp, pct))
        if all(pt[3] is not None for pt in points):
            used = [(d, pct) for d, _u, _a, pct in points]
        else:
            last_unit, used = points[-1][1], []
            for d, u, a, _pct in reversed(points):
                if u != last_unit:
                    break
                used.insert(0, (d, a))
            if last_unit == "mixed":
                continue
        if len(used) < 3 or len({d for d, _ in used}) < 2:
            continue
        ref = scipy.stats.linregress([d for d, _ in used], [v for _, v in used])
        if ref.slope > 0:
            out[rows[-1].serial_number] = (ref.slope * 365.25, ref.pvalue)
    return out


def test_drift_lines_fitted_together_equal_each_rotor_fitted_alone(db, generated) -> None:  # type: ignore[no-untyped-def]
    # Reference: the definition worked one rotor at a time with scipy.stats.linregress.
    job = db.scalars(select(Job).where(Job.machine_id.is_not(None)).limit(1)).one()
    seen = 0
    for scope in (EVERYTHING, Scope(customer_id=job.customer_id)):
        for p in _periods()[-4:]:
            _examined, rising = drift.rotor_drift(db, p, scope)
            want = _drift_by_definition(db, p, scope)
            got = {d.serial_number: (d.slope_per_year, d.p_value) for d in rising}
            assert got.keys() == want.keys(), (p, scope)
            for serial, (slope, p_value) in want.items():
                assert got[serial][0] == pytest.approx(slope, rel=1e-9, abs=1e-12)
                assert got[serial][1] == pytest.approx(p_value, rel=1e-7, abs=1e-15)
            assert [d.p_value for d in rising] == sorted(d.p_value for d in rising)
            seen += len(want)
    assert seen > 0  # the comparison saw rising rotors


def test_deferred_facts_are_written_once_at_the_end_as_a_rebuild_gives_them(
        db, shop, make_user) -> None:  # type: ignore[no-untyped-def]
    # Inside deferred() flushes leave the facts as they were; at its end they are what a
    # rebuild from scratch gives for the final rows (a job's state set back and forth, as
    # the demo's certificate slices do, a reading changed).
    hs = measures_shop.build(db, shop, make_user)
    db.flush()
    before = _snapshot(db)
    done = next(j for j in hs.jobs.values() if j.state == "dispatched")
    with facts.deferred(db):
        reopen(db, done, by=hs.users["A"], reason="weight found loose")
        db.flush()
        reading = db.scalars(select(RunReading).where(RunReading.plane == 2)).first()
        reading.amplitude = 777.0
        db.flush()
        db.expire_all()
        assert _snapshot(db) == before  # nothing written yet
    kept = _snapshot(db)
    assert kept != before
    facts.rebuild(db)
    assert _snapshot(db) == kept
    db.expire_all()
    assert db.get(JobFact, done.id).first_reopen_at is not None


def test_a_rotor_moved_to_another_rotor_type_moves_its_jobs_facts(db, shop, make_user) -> None:  # type: ignore[no-untyped-def]
    # A job's rotor type is its rotor's (the slices and limits follow it): when a rotor is
    # put under another type of the same customer (registry.rotors.update_rotor), its
    # jobs' facts must follow at once, as a rebuild from scratch would give them.
    from shopapp.registry.rotors import update_rotor

    hs = measures_shop.build(db, shop, make_user)
    job = next(iter(hs.jobs.values()))
    rotor = job.rotor
    other = shop.rotor_type(rotor.customer, part_number="MOVED-TO")
    admin = make_user("admin")
    update_rotor(db, rotor, by=admin, rotor_type=other)
    db.flush()
    kept = _snapshot(db)
    assert db.get(JobFact, job.id).rotor_type_id == other.id
    facts.rebuild(db)
    assert _snapshot(db) == kept
