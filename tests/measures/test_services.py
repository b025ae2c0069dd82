"""Shop measures against hand counts of a small invented shop (tests/measures_shop.py).

Every expected number below is counted by hand from the job table in that module's
docstring; the count is written beside it. Working days and percentiles are also
checked against numpy (``numpy.busday_count`` and ``numpy.percentile``) as
independent references.
"""

from __future__ import annotations

import datetime as dt
import random

import numpy as np
import pytest
from sqlalchemy import select

from shopapp.core.errors import PermissionDenied, ValidationFailed
from shopapp.measures import lists
from shopapp.measures import services as measures
from shopapp.measures.figures import DIMENSIONS
from shopapp.measures.periods import Period, Scope, parse_month
from shopapp.measures.sql import working_days
from shopapp.models import Job
from tests import measures_shop
from tests.measures_shop import TODAY

OCT = Period.month(2026, 10)


@pytest.fixture()
def hand(db, shop, make_user):  # type: ignore[no-untyped-def]
    return measures_shop.build(db, shop, make_user)


@pytest.fixture()
def owner(make_user):  # type: ignore[no-untyped-def]
    return make_user("owner")


@pytest.fixture()
def report(db, hand, owner):  # type: ignore[no-untyped-def]
    return measures.shop_report(db, OCT, by=owner, today=TODAY)


def test_working_days_match_numpy_busday_count() -> None:
    # Reference: numpy.busday_count(a, b) counts Mon–Fri in [a, b); ours is (a, b].
    rng = random.Random(7)
    for _ in range(500):
        a = dt.date(2020, 1, 1) + dt.timedelta(days=rng.randrange(0, 3000))
        b = a + dt.timedelta(days=rng.randrange(0, 60))
        one = dt.timedelta(days=1)
        assert working_days(a, b) == int(np.busday_count(a + one, b + one))


def test_sql_working_days_and_percentiles_match_numpy(db, shop, owner) -> None:  # type: ignore[no-untyped-def]
    # Random receipt/dispatch dates; the SQL turnaround median and 90th percentile must
    # equal numpy.percentile (linear, its default) of numpy.busday_count values.
    rng = random.Random(11)
    rotor = shop.rotor()
    values = []
    for _ in range(37):
        received = dt.date(2026, 3, 1) + dt.timedelta(days=rng.randrange(0, 20))
        dispatched = dt.date(2026, 4, 1) + dt.timedelta(days=rng.randrange(0, 29))
        shop.job(rotor, received_on=received, dispatched_on=dispatched, state="dispatched")
        values.append(int(np.busday_count(received + dt.timedelta(days=1),
                                          dispatched + dt.timedelta(days=1))))
    fig = measures.period_figures(db, Period.month(2026, 4), by=owner, today=TODAY)
    assert fig.jobs_dispatched == 37
    assert fig.turnaround_median_wd == pytest.approx(np.percentile(values, 50))
    assert fig.turnaround_p90_wd == pytest.approx(np.percentile(values, 90))


def test_headline_figures_of_october_match_the_hand_count(report) -> None:  # type: ignore[no-untyped-def]
    f = report.figures
    assert f.jobs_received == 11  # J1–J4, J6–J12 (J5 came in September)
    assert f.jobs_dispatched == 6  # J1, J2, J3, J4, J5 (10-01), J10
    # turnarounds 1 (J3), 2 (J10), 3 (J1), 3 (J5), 5 (J2), 6 (J4):
    # median = (3+3)/2 = 3; p90 at rank 1+0.9·5 = 5.5 → 5 + 0.5·(6−5) = 5.5
    assert f.turnaround_median_wd == pytest.approx(3.0)
    assert f.turnaround_p90_wd == pytest.approx(5.5)
    # promised: J1 hit, J2 miss, J4 hit, J5 miss, J10 hit (J3 had no promise) → 3/5
    assert (f.promised_jobs, f.promised_hit) == (5, 3)
    assert f.promised_hit_rate == pytest.approx(0.6)
    # WIP on 10-31: J6 (certified, 13 wd), J8 (9 wd), J9 (4 wd); J7, J11, J12 rejected
    assert f.wip_jobs == 3
    assert f.wip_age_median_wd == pytest.approx(9.0)
    assert f.wip_age_max_wd == 13
    # reached in October: J1, J2, J3, J4, J6, J10; steps 1+3+1+1+1+0 = 7 → 7/6
    assert f.reached_in_tolerance == 6
    assert f.correction_cycles_mean == pytest.approx(7 / 6)
    # judged: J1 ✓, J2 ✗, J3 ✓, J4 ✓, J6 ✓ (J10 needed no correction) → 4/5
    assert (f.first_pass_judged, f.first_pass_jobs) == (5, 4)
    assert f.first_pass_rate == pytest.approx(0.8)
    # reworked within 90 days of reaching tolerance: J4 (reached 10-08, reopened 10-09),
    # J10 (reached 10-21 10:00, reopened 15:00) → 2/6. J6 is itself a return: it counts
    # against J5, which reached tolerance in September.
    assert f.reworked_jobs == 2
    assert f.rework_rate == pytest.approx(2 / 6)
    assert f.rejected_jobs == 3  # J7, J11, J12
    # left the shop: dispatched J1 J2 J3 J4 J5 J10, rejected J7 J11 J12 → 3 of 9 rejected
    assert f.jobs_closed == 9
    assert f.rejection_rate == pytest.approx(3 / 9)


def test_previous_period_is_september(report) -> None:  # type: ignore[no-untyped-def]
    p = report.previous
    assert report.previous_period == Period.month(2026, 9)
    assert p.jobs_received == 1  # J5
    assert p.jobs_dispatched == 0  # J5 left on 10-01
    assert (p.wip_jobs, p.wip_age_max_wd) == (1, 2)  # J5 on 09-30: 09-29, 09-30
    assert p.reached_in_tolerance == 1  # J5
    assert p.correction_cycles_mean == pytest.approx(3.0)  # answers runs 1, 2, 3
    assert (p.first_pass_judged, p.first_pass_jobs) == (1, 0)  # run 2 was out
    # J5 came back as return J6 on 10-13, 13 days after reaching tolerance → 1 of 1
    assert (p.reworked_jobs, p.rejected_jobs, p.jobs_closed) == (1, 0, 0)
    assert p.rework_rate == 1.0


def test_slices_by_operator_match_the_hand_count(report, hand) -> None:  # type: ignore[no-untyped-def]
    rows = {r.label: r.figures for r in report.slices["operator"]}
    assert set(rows) == {"Avery Operator", "Blake Operator"}
    a, b = rows["Avery Operator"], rows["Blake Operator"]
    # A: J1 J2 J6 J7 J9 J11; B: J3 J4 J8 J10 J12
    assert (a.jobs_received, b.jobs_received) == (6, 5)
    assert (a.jobs_dispatched, b.jobs_dispatched) == (2, 4)  # A: J1 J2; B: J3 J4 J5 J10
    # A: 3, 5 → median 4, p90 3 + 0.9·2 = 4.8; B: 1, 2, 3, 6 → 2.5 and 3 + 0.7·3 = 5.1
    assert (a.turnaround_median_wd, a.turnaround_p90_wd) == pytest.approx((4.0, 4.8))
    assert (b.turnaround_median_wd, b.turnaround_p90_wd) == pytest.approx((2.5, 5.1))
    assert (a.promised_jobs, a.promised_hit, b.promised_jobs, b.promised_hit) == (2, 1, 3, 2)
    assert (a.wip_jobs, a.wip_age_median_wd, a.wip_age_max_wd) == (2, 8.5, 13)  # J6 13, J9 4
    assert (b.wip_jobs, b.wip_age_median_wd, b.wip_age_max_wd) == (1, 9.0, 9)  # J8
    assert (a.reached_in_tolerance, b.reached_in_tolerance) == (3, 3)
    assert a.correction_cycles_mean == pytest.approx(5 / 3)  # J1 1, J2 3, J6 1
    assert b.correction_cycles_mean == pytest.approx(2 / 3)  # J3 1, J4 1, J10 0
    assert (a.first_pass_judged, a.first_pass_jobs) == (3, 2)  # J2 failed
    assert (b.first_pass_judged, b.first_pass_jobs) == (2, 2)  # J10 not judged
    assert (a.reworked_jobs, b.reworked_jobs) == (0, 2)  # A: none (J6 counts for J5); B: J4, J10
    assert a.rework_rate == 0.0
    assert b.rework_rate == pytest.approx(2 / 3)
    assert (a.rejected_jobs, b.rejected_jobs) == (2, 1)  # A: J7, J11; B: J12
    keys = {r.label: r.key_id for r in report.slices["operator"]}
    assert keys["Avery Operator"] == hand.users["A"].id


def test_slices_by_rotor_type_machine_and_customer(report) -> None:  # type: ignore[no-untyped-def]
    rt = {r.label: r.figures for r in report.slices["rotor_type"]}
    t1, t2 = rt["HS-T1 fan"], rt["HS-T2 pump"]
    assert (t1.jobs_received, t2.jobs_received) == (6, 5)  # T1: J1 J2 J6 J9 J10 J12
    assert (t1.reached_in_tolerance, t1.reworked_jobs) == (4, 1)  # J1 J2 J6 J10; J10
    assert (t2.reached_in_tolerance, t2.reworked_jobs) == (2, 1)  # J3 J4; J4
    assert (t1.rejected_jobs, t2.rejected_jobs) == (1, 2)  # J12; J7 J11
    machines = {r.label: r.figures for r in report.slices["machine"]}
    assert machines["Hand shop M1"].jobs_received == 6  # J1 J2 J7 J9 J10 J12
    assert machines["Hand shop M2"].jobs_received == 5  # J3 J4 J6 J8 J11
    assert machines["Hand shop M2"].wip_jobs == 2  # J6, J8
    customers = {r.label: r.figures for r in report.slices["customer"]}
    assert customers["Hand Shop Fans Ltd (invented)"].jobs_dispatched == 4  # J1 J2 J5 J10
    assert customers["Hand Shop Pumps Ltd (invented)"].jobs_dispatched == 2  # J3 J4


def test_months_of_the_year_and_the_trend(db, hand, owner, report) -> None:  # type: ignore[no-untyped-def]
    year = measures.period_figures(db, Period.year(2026), by=owner, dimension="month",
                                   today=TODAY)
    received = {r.key: r.figures.jobs_received for r in year}
    assert len(received) == 12
    # J13 03, J15 04, J14 06, J16 07, J5 09, eleven in October
    assert received == {"2026-01": 0, "2026-02": 0, "2026-03": 1, "2026-04": 1, "2026-05": 0,
                        "2026-06": 1, "2026-07": 1, "2026-08": 0, "2026-09": 1,
                        "2026-10": 11, "2026-11": 0, "2026-12": 0}
    trend = {r.key: r.figures for r in report.trend}
    assert list(trend) == Period(dt.date(2025, 11, 1), OCT.end).months()  # twelve months
    assert [trend[m].reached_in_tolerance for m in ("2026-03", "2026-09", "2026-10")] == [1, 1, 6]
    assert trend["2026-09"].first_pass_rate == 0.0  # J5 failed its first check
    assert trend["2026-06"].first_pass_rate == 1.0  # J14
    assert trend["2026-10"].rework_rate == pytest.approx(2 / 6)  # J4, J10
    assert trend["2026-09"].rework_rate == 1.0  # J5, returned as J6
    assert trend["2026-08"].rework_rate is None  # nothing reached tolerance in August


def test_rework_and_rejection_reasons(report) -> None:  # type: ignore[no-untyped-def]
    assert [(r.reason, r.count) for r in report.rework_reasons] == [
        ("customer return", 1),  # J6
        ("key fitted wrong", 1),  # J4
        ("wrong balancing speed", 1),  # J10
    ]
    assert [(r.reason, r.count) for r in report.rejection_reasons] == [
        ("cracked hub", 2),  # J7, J12
        ("over machine capacity", 1),  # J11
    ]


def test_rotors_getting_worse(db, hand, owner, report) -> None:  # type: ignore[no-untyped-def]
    # R1: 10 → 15 → 25 rises twice; R2: 30 → 12 → 20 does not; R5 has only two visits.
    assert [(w.serial_number, w.initial_amplitudes) for w in report.rotors_getting_worse] == [
        ("HS-R1", (10.0, 15.0, 25.0))
    ]
    two = lists.rotors_getting_worse(db, OCT, visits=2)
    # One rise: R5 (40 → 50, latest 10-13), R1 (15 → 25) and R2 (12 → 20), both 10-05
    assert [w.serial_number for w in two] == ["HS-R5", "HS-R1", "HS-R2"]
    with pytest.raises(ValidationFailed, match="visits"):
        lists.rotors_getting_worse(db, OCT, visits=1)


def test_machine_utilisation_and_verification_status(report) -> None:  # type: ignore[no-untyped-def]
    rows = {m.name: m for m in report.machines}
    # M1: J1 2 runs, J2 5, J10 3 (J5's runs were in September); M2: J3 2, J4 3, J6 2, J8 1, J11 1
    assert (rows["Hand shop M1"].jobs, rows["Hand shop M1"].runs) == (3, 10)
    assert (rows["Hand shop M2"].jobs, rows["Hand shop M2"].runs) == (5, 9)
    assert rows["Hand shop M1"].status == "due soon"  # due 2026-11-20, 5 days after today
    assert rows["Hand shop M1"].due_on == dt.date(2026, 11, 20)
    assert rows["Hand shop M2"].status == "overdue"  # due 2026-06-01
    assert rows["Hand shop M3"].status == "current"  # due 2027-02-28
    assert rows["Hand shop M4"].status == "failed"  # latest, 2026-10-01, failed
    assert rows["Hand shop M5"].status == "never verified"
    assert (rows["Hand shop M3"].jobs, rows["Hand shop M3"].runs) == (0, 0)


def test_scope_restricts_every_measure(db, hand, owner, report) -> None:  # type: ignore[no-untyped-def]
    scoped = measures.shop_report(db, OCT, by=owner, today=TODAY,
                                  scope=Scope(operator_id=hand.users["B"].id))
    by_op = {r.label: r.figures for r in report.slices["operator"]}
    assert scoped.figures == by_op["Blake Operator"]
    assert [r.reason for r in scoped.rework_reasons] == ["key fitted wrong",
                                                         "wrong balancing speed"]
    assert [r.reason for r in scoped.rejection_reasons] == ["cracked hub"]  # J12


def test_json_is_keyed_by_the_measure_names(report) -> None:  # type: ignore[no-untyped-def]
    data = report.to_json()
    for name in ("jobs_received", "jobs_dispatched", "wip_jobs", "wip_age_median_wd",
                 "turnaround_median_wd", "turnaround_p90_wd", "promised_hit_rate",
                 "first_pass_rate", "correction_cycles_mean", "rework_rate", "rework_reasons",
                 "rejected_jobs", "rejection_reasons", "rotors_getting_worse",
                 "machine_utilisation", "machine_verification"):
        assert name in data, name
    assert data["jobs_received"] == 11
    assert set(data["by"]) == set(DIMENSIONS)


def test_periods_and_their_previous_ones() -> None:
    assert Period.month(2026, 1).previous() == Period.month(2025, 12)
    assert Period.quarter(2026, 1).previous() == Period.quarter(2025, 4)
    assert Period.week(dt.date(2026, 10, 7)).start == dt.date(2026, 10, 5)  # a Monday
    custom = Period(dt.date(2026, 10, 10), dt.date(2026, 10, 19))
    assert custom.previous() == Period(dt.date(2026, 9, 30), dt.date(2026, 10, 9))
    assert parse_month("2026-10") == OCT
    with pytest.raises(ValidationFailed, match="before 1990"):
        parse_month("1900-01")  # the dashboard refuses days before 1990 too
    with pytest.raises(ValidationFailed, match="YYYY-MM"):
        parse_month("October")
    with pytest.raises(ValidationFailed, match="before it starts"):
        Period(dt.date(2026, 10, 2), dt.date(2026, 10, 1))


def test_only_dashboard_roles_may_read_the_measures(db, make_user) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(PermissionDenied):
        measures.shop_report(db, OCT, by=make_user("operator"))


def test_measures_load_no_jobs_into_python(db, hand, owner, count_queries) -> None:  # type: ignore[no-untyped-def]
    # The session must not hold Job objects built by the measures (all aggregates in SQL).
    db.expunge_all()
    measures.shop_report(db, OCT, by=owner, today=TODAY)
    assert not [o for o in db.identity_map.values() if isinstance(o, Job)]
    assert db.scalar(select(Job.id).limit(1)) is not None
