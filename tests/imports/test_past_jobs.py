"""Past jobs from spreadsheets: stored as finished imported jobs, shown in the rotor's
history, never certified, and left out of every shop measure.

References: the sample files (read by hand), unit factors from the 1959 agreement
(via the README table), and for the measures the pre-facts SQL kept in
tests/measures/raw_reference.py, computed on the shop before anything is imported.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pytest
from sqlalchemy import func, select

from shopapp.demo.bulk import generate_bulk
from shopapp.imports import files, service
from shopapp.jobs import rotor_history
from shopapp.measures import figures, lists
from shopapp.measures.periods import EVERYTHING, Period
from shopapp.models import Certificate, ImportedJob, Job, JobFact, Rotor, RotorType
from tests.measures import raw_reference as raw

DATA = Path(__file__).resolve().parents[1] / "data" / "imports"
END = dt.date(2026, 10, 30)
DIMS = ["all", "operator", "machine", "rotor_type", "customer", "month"]


def sheet(name: str) -> files.Sheet:
    return files.read_sheet((DATA / name).read_bytes(), name)


@pytest.fixture()
def registry(db, make_user):  # type: ignore[no-untyped-def]
    admin = make_user("admin")
    for name in ("customers.csv", "rotor-types.csv", "rotors.csv"):
        service.apply(db, by=admin, kind=name.split(".")[0], sheet=sheet(name))
    return admin


def test_past_jobs_are_stored_dispatched_imported_and_without_facts(db, registry) -> None:
    report = service.apply(db, by=registry, kind="jobs", sheet=sheet("jobs.csv"))
    assert [r.action for r in report.rows] == ["create", "create", "create"]
    jobs = list(db.scalars(select(Job).order_by(Job.received_on)))
    # jobs.csv by hand: an old number kept, one without a number, one with a fail verdict.
    assert [j.number for j in jobs] == ["OLD-2019-014", "OLD-2020-201", "J2021-00001"]
    assert {j.state for j in jobs} == {"dispatched"}
    assert all(j.imported for j in jobs)
    old_fail = jobs[1].imported_record
    assert (old_fail.passed, old_fail.residual_1_gmm, old_fail.residual_2_gmm) == (
        False, 9000.0, 8500.0)
    # 1.1 g·cm = 11 g·mm (1 cm = 10 mm).
    assert jobs[2].imported_record.residual_1_gmm == pytest.approx(11.0)
    assert jobs[0].imported_record.residual_1_angle_deg == 45.0
    assert db.scalar(select(func.count()).select_from(JobFact)) == 0
    assert db.scalar(select(func.count()).select_from(Certificate)) == 0
    # Applying the same file again finds every job already there.
    again = service.apply(db, by=registry, kind="jobs", sheet=sheet("jobs.csv"))
    assert [r.action for r in again.rows] == ["unchanged"] * 3


def test_the_rotor_history_shows_the_imported_visit(db, registry) -> None:
    service.apply(db, by=registry, kind="jobs", sheet=sheet("jobs.csv"))
    rotor = db.scalars(select(Rotor).where(Rotor.serial_number == "BW-1001")).one()
    data = rotor_history.build(db, rotor)
    assert [(v.job_number, v.imported) for v in data.visits] == [
        ("OLD-2019-014", True), ("J2021-00001", True)]
    first = data.visits[0]
    assert first.initial_gmm == (None, None)  # no run: nothing to compare as received
    assert first.passed is True
    assert all(p is not None and p > 0 for p in first.residual_pct)


@pytest.mark.parametrize("name, column, words", [
    ("bad_unknown_unit_jobs.csv", "residual_unit", "unknown unit 'lb·ft'"),
    ("bad_angle_jobs.csv", "residual_1_angle_deg", "must be at most"),
    ("bad_formula_jobs.xlsx", "", "holds a formula (=B2*2)"),
])
def test_bad_past_jobs_are_refused_and_nothing_is_written(db, registry, name, column,
                                                          words) -> None:
    with pytest.raises(service.ImportRefused) as caught:
        service.apply(db, by=registry, kind="jobs", sheet=sheet(name))
    (refused,) = caught.value.report.refused
    assert (refused.line, refused.column) == (2, column)
    assert words in refused.reason
    assert db.scalar(select(func.count()).select_from(Job)) == 0


def test_a_taken_job_number_and_dates_out_of_order_are_refused(db, registry, shop) -> None:
    rotor = db.scalars(select(Rotor).where(Rotor.serial_number == "BW-1002")).one()
    shop.job(rotor, number="OLD-7")
    data = ("customer,serial_number,number,received_on,dispatched_on,residual_unit,"
            "residual_1,residual_2,verdict\n"
            "Brackwater Pumps (invented),BW-1002,old-7,2020-01-06,2020-01-08,g·mm,3,2,pass\n"
            "Brackwater Pumps (invented),BW-1002,,2020-02-06,2020-02-01,g·mm,3,2,pass\n"
            "Brackwater Pumps (invented),BW-1002,,06/03/2020,2020-03-08,g·mm,3,2,pass\n")
    report = service.preview(db, by=registry, kind="jobs",
                             sheet=files.read_sheet(data.encode(), "jobs.csv"))
    assert [(r.action, r.column) for r in report.rows] == [
        ("refused", "number"), ("refused", "dispatched_on"), ("refused", "received_on")]


def test_imported_jobs_change_no_shop_measure(db, make_user) -> None:
    """Reference: tests/measures/raw_reference.py (the measures' SQL before the facts)
    on the same shop before any job is imported; after importing past jobs for the
    shop's own rotors, inside the same periods and on its machines, every figure of
    every slice and the rotors getting worse must be exactly as before."""
    generate_bulk(db, jobs=60, runs_per_job=4, years=1.0, end_date=END, seed=5)
    db.flush()
    quality = make_user("quality")
    periods = [Period.month(2026, m) for m in range(1, 11)] + [
        Period.containing("year", dt.date(2026, 6, 1))]

    def reference() -> dict:  # type: ignore[type-arg]
        out = {}
        for p in periods:
            as_of = min(p.end, END)
            out[p] = figures._merge([
                raw._received(db, p, EVERYTHING, DIMS),
                raw._dispatched(db, p, EVERYTHING, DIMS),
                raw._wip(db, p, EVERYTHING, DIMS, as_of),
                raw._tolerance_cohort(db, p, EVERYTHING, DIMS, END),
                raw._closed(db, p, EVERYTHING, DIMS),
            ])
        return out

    before = reference()
    worse_before = [lists.rotors_getting_worse(db, p, visits=2) for p in periods]
    jobs_before = db.scalar(select(func.count()).select_from(Job))

    rows = ["customer,serial_number,received_on,dispatched_on,machine,residual_unit,"
            "residual_1,residual_2,verdict"]
    pairs = db.execute(select(Rotor, RotorType).join(RotorType)).all()
    machine = db.scalars(select(Job.machine_id).where(Job.machine_id.is_not(None))).first()
    from shopapp.models import Machine
    machine_name = db.get(Machine, machine).name
    for k, (rotor, rt) in enumerate(pairs[:20]):
        day = dt.date(2026, 1 + k % 10, 5 + k % 3)
        second = "1.5" if rt.planes == 2 else ""
        rows.append(f'"{rotor.customer.name}",{rotor.serial_number},{day},'
                    f'{day + dt.timedelta(days=3)},"{machine_name}",g·mm,2.5,{second},'
                    f"{'fail' if k % 4 == 0 else 'pass'}")
    report = service.apply(db, by=quality, kind="jobs",
                           sheet=files.read_sheet("\n".join(rows).encode(), "past.csv"))
    assert report.count("create") == len(pairs[:20]) > 10
    assert db.scalar(select(func.count()).select_from(ImportedJob)) == len(pairs[:20])

    for p in periods:
        as_of = min(p.end, END)
        now = figures.figures_for(db, p, EVERYTHING, DIMS, as_of, today=END)
        assert now.keys() == before[p].keys(), p
        for key, fig in before[p].items():
            assert now[key].as_dict() == pytest.approx(fig.as_dict(), nan_ok=True), (p, key)
    assert [lists.rotors_getting_worse(db, p, visits=2) for p in periods] == worse_before
    # The facts hold exactly the shop's own jobs (counted by hand: all minus imported).
    assert db.scalar(select(func.count()).select_from(JobFact)) == jobs_before


def test_an_imported_job_is_never_reopened_or_returned(db, registry, make_user) -> None:
    """Issue 14: imported jobs never count as rework and never get a certificate; a
    reopening or a customer return would make them rework (common practice, no source)."""
    from shopapp.core.errors import TransitionRefused
    from shopapp.jobs import states

    service.apply(db, by=registry, kind="jobs", sheet=sheet("jobs.csv"))
    job = db.scalars(select(Job).where(Job.number == "OLD-2019-014")).one()
    operator = make_user("operator")
    assert "reopen" not in states.allowed_actions(job)
    assert "return" not in states.allowed_actions(job)
    with pytest.raises(TransitionRefused, match="past job imported from old records"):
        states.reopen(db, job, by=operator, reason="vibration came back")
    with pytest.raises(TransitionRefused, match="past job imported from old records"):
        states.open_return(db, by=operator, earlier_job=job)
