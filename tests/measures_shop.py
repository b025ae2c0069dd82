"""A small invented shop, built by hand, whose shop measures are counted by hand.

Used by the measures, dashboard and ``report shop`` tests. The period under test
is October 2026 (previous period: September 2026); "today" is 2026-11-15.
Weekdays (from the calendar): 2026-09-28 Mon, 10-01 Thu, 10-05 Mon, 10-13 Tue,
10-19 Mon, 10-20 Tue, 10-26 Mon, 10-31 Sat.

Jobs (op = operator A or B, machine M1 or M2; R = rotor; T1 belongs to customer C1,
T2 to C2). "reached" is ``first_in_tolerance_at``; runs are (seq, purpose, verdict);
a correction "answers" the run with that seq.

J1  R1 T1 A M1  recv 10-05 prom 10-09 disp 10-08 reached 10-06; runs 1 initial (25, 8 g·mm),
    2 check ✓; corrections 2 planes answering run 1            → 1 step, first pass ✓
J2  R2 T1 A M1  recv 10-05 prom 10-09 disp 10-12 reached 10-07 15:00; runs 1 initial (20),
    2 trial, 3 check ✗, 4 check ✗, 5 check ✓; corrections answer run 2 (2 planes),
    run 3, run 4                                                 → 3 steps, first pass ✗
J3  R3 T2 B M2  recv 10-01 disp 10-02 reached 10-02; runs 1 initial (5), 2 check ✓;
    correction answers 1                                         → 1 step, ✓
J4  R4 T2 B M2  recv 10-06 prom 10-20 disp 10-14 reached 10-08; runs 1 initial (6),
    2 check ✓, 3 check ✓; correction answers 1 (10-07); reopened 10-09 from certified
    "key fitted wrong"; correction answers 2 on 10-12 (after reaching: rework)  → 1 step, ✓
J5  R5 T1 B M1  recv 09-28 prom 09-30 disp 10-01 reached 09-30; runs 1 initial (40),
    2 check ✗, 3 check ✗, 4 check ✓; corrections answer 1, 2, 3 → 3 steps, ✗ (September)
J6  R5 T1 A M2  return of J5, recv 10-13, certified, reached 10-14; runs 1 initial (50),
    2 check ✓; correction answers 1                              → 1 step, ✓
J7  R6 T2 A M1  recv 10-15, rejected 10-16 "cracked hub"; no runs
J8  R7 T2 B M2  recv 10-19, on_machine; run 1 initial (7) on 10-20
J9  R8 T1 A M1  recv 10-26, booked_in
J10 R9 T1 B M1  recv 10-20 prom 10-22 disp 10-22 reached 10-21 10:00; runs 1 initial (2),
    2 final ✓, 3 final ✓; no correction; reopened 10-21 15:00 from in_tolerance
    "wrong balancing speed"                                      → 0 steps, not judged
J11 R10 T2 A M2 recv 10-21, run 1 initial (9) on 10-22, rejected 10-23 "over machine capacity"
J12 R11 T1 B M1 recv 10-27, rejected 10-28 "cracked hub"; no runs
Earlier visits (op A, M1, each: initial run, correction answering it, check ✓, dispatched
two days after receipt, reached the day after receipt):
J13 R1 recv 03-02 initial (10, 4); J14 R1 recv 06-01 initial (15, 3);
J15 R2 recv 04-06 initial (30);    J16 R2 recv 07-06 initial (12).

Rework (issue 17): a job counts as reworked when it came back within 90 days of first
reaching tolerance — J4 and J10 (reopened) in October, J5 (returned as J6) in September;
a return counts against the job it returns, not against itself.

Machines: M1 verified 2025-11-20 (passed, interval 365 → due 2026-11-20, 5 days after
today → due soon with the default 14 days); M2 verified 2025-06-01 (passed, due
2026-06-01 → overdue); M3 verified 2026-09-01 (passed, interval 180 → due 2027-02-28,
current); M4 passed 2026-01-05 then failed 2026-10-01 (failed); M5 never verified.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy.orm import Session

from shopapp.models import (
    Correction,
    Job,
    JobTransition,
    Machine,
    MachineVerification,
    Run,
    RunReading,
    User,
)

TODAY = dt.date(2026, 11, 15)


def at(day: str, hour: int = 10, minute: int = 0) -> dt.datetime:
    d = dt.date.fromisoformat(day)
    return dt.datetime(d.year, d.month, d.day, hour, minute, tzinfo=dt.UTC)


def d(day: str) -> dt.date:
    return dt.date.fromisoformat(day)


@dataclass
class HandShop:
    users: dict[str, User] = field(default_factory=dict)
    machines: dict[str, Machine] = field(default_factory=dict)
    rotor_types: dict[str, Any] = field(default_factory=dict)
    customers: dict[str, Any] = field(default_factory=dict)
    jobs: dict[str, Job] = field(default_factory=dict)


# (seq, purpose, verdict, taken_at, amplitudes of planes 1/2 or None)
RunSpec = tuple[int, str, bool | None, dt.datetime, Sequence[float] | None]


def _job(
    db: Session,
    shop: Any,
    rotor: Any,
    *,
    operator: User,
    machine: Machine,
    received: str,
    state: str,
    promised: str | None = None,
    dispatched: str | None = None,
    reached: dt.datetime | None = None,
    runs: Sequence[RunSpec] = (),
    corrections: Sequence[tuple[int, int, dt.datetime]] = (),  # (answers seq, planes, at)
    transitions: Sequence[tuple[str | None, str, dt.datetime, str]] = (),
    **kw: Any,
) -> Job:
    job = shop.job(
        rotor,
        operator_id=operator.id,
        machine_id=machine.id,
        received_on=d(received),
        promised_on=d(promised) if promised else None,
        dispatched_on=d(dispatched) if dispatched else None,
        first_in_tolerance_at=reached,
        state=state,
        reopen_count=sum(1 for t in transitions if t[1] == "on_machine" and t[0] in
                         ("in_tolerance", "certified", "dispatched")),
        **kw,
    )
    by_seq: dict[int, Run] = {}
    for seq, purpose, verdict, taken, amps in runs:
        trial = {}
        if purpose == "trial":
            trial = {"trial_plane": 1, "trial_mass_g": 20.0, "trial_angle_deg": 0.0,
                     "trial_radius_mm": 300.0}
        run = Run(job_id=job.id, seq=seq, purpose=purpose, speed_rpm=600.0,
                  within_tolerance=verdict, taken_at=taken, by_id=operator.id, **trial)
        db.add(run)
        db.flush()
        for plane, amp in enumerate(amps or (), start=1):
            db.add(RunReading(run_id=run.id, plane=plane, amplitude=amp, angle_deg=10.0,
                              unit="g·mm"))
        by_seq[seq] = run
    for seq, planes, applied in corrections:
        for plane in range(1, planes + 1):
            db.add(Correction(job_id=job.id, run_id=by_seq[seq].id, plane=plane, mass_g=5.0,
                              angle_deg=90.0, radius_mm=300.0, applied_at=applied,
                              applied_by_id=operator.id))
    for from_state, to_state, when, reason in transitions:
        db.add(JobTransition(job_id=job.id, from_state=from_state, to_state=to_state,
                             at=when, reason=reason, by_id=operator.id))
    db.flush()
    return job


def build(db: Session, shop: Any, make_user: Callable[..., User]) -> HandShop:
    hs = HandShop()
    hs.users["A"] = make_user("operator", full_name="Avery Operator")
    hs.users["B"] = make_user("operator", full_name="Blake Operator")
    a, b = hs.users["A"], hs.users["B"]
    for name in ("M1", "M2", "M3", "M4", "M5"):
        hs.machines[name] = shop.machine(
            name=f"Hand shop {name}", verification_interval_days=180 if name == "M3" else 365
        )
    m1, m2 = hs.machines["M1"], hs.machines["M2"]
    for machine, day, passed in (
        ("M1", "2025-11-20", True), ("M2", "2025-06-01", True), ("M3", "2026-09-01", True),
        ("M4", "2026-01-05", True), ("M4", "2026-10-01", False),
    ):
        db.add(MachineVerification(machine_id=hs.machines[machine].id, performed_on=d(day),
                                   proving_rotor="proving rotor PR-1", passed=passed))
    c1 = hs.customers["C1"] = shop.customer(name="Hand Shop Fans Ltd (invented)")
    c2 = hs.customers["C2"] = shop.customer(name="Hand Shop Pumps Ltd (invented)")
    t1 = hs.rotor_types["T1"] = shop.rotor_type(c1, part_number="HS-T1", description="fan")
    t2 = hs.rotor_types["T2"] = shop.rotor_type(c2, part_number="HS-T2", description="pump")
    r = {n: shop.rotor(t1 if n in (1, 2, 5, 8, 9, 11) else t2, serial_number=f"HS-R{n}")
         for n in range(1, 12)}

    def old_visit(key: str, rotor: Any, received: str, amps: Sequence[float]) -> None:
        rd = d(received)
        nxt, disp = (rd + dt.timedelta(days=1)).isoformat(), (rd + dt.timedelta(days=2))
        hs.jobs[key] = _job(
            db, shop, rotor, operator=a, machine=m1, received=received, state="dispatched",
            dispatched=disp.isoformat(), reached=at(nxt, 12),
            runs=[(1, "initial", None, at(nxt, 9), amps), (2, "check", True, at(nxt, 11), None)],
            corrections=[(1, 1, at(nxt, 10))],
        )

    old_visit("J13", r[1], "2026-03-02", (10.0, 4.0))
    old_visit("J15", r[2], "2026-04-06", (30.0,))
    old_visit("J14", r[1], "2026-06-01", (15.0, 3.0))
    old_visit("J16", r[2], "2026-07-06", (12.0,))

    hs.jobs["J1"] = _job(
        db, shop, r[1], operator=a, machine=m1, received="2026-10-05", promised="2026-10-09",
        dispatched="2026-10-08", state="dispatched", reached=at("2026-10-06", 12),
        runs=[(1, "initial", None, at("2026-10-06", 9), (25.0, 8.0)),
              (2, "check", True, at("2026-10-06", 11), (1.0, 1.0))],
        corrections=[(1, 2, at("2026-10-06", 10))],
    )
    hs.jobs["J2"] = _job(
        db, shop, r[2], operator=a, machine=m1, received="2026-10-05", promised="2026-10-09",
        dispatched="2026-10-12", state="dispatched", reached=at("2026-10-07", 15),
        runs=[(1, "initial", None, at("2026-10-06", 9), (20.0,)),
              (2, "trial", None, at("2026-10-06", 10), (26.0,)),
              (3, "check", False, at("2026-10-07", 9), (6.0,)),
              (4, "check", False, at("2026-10-07", 11), (3.0,)),
              (5, "check", True, at("2026-10-07", 14), (1.0,))],
        corrections=[(2, 2, at("2026-10-06", 16)), (3, 1, at("2026-10-07", 10)),
                     (4, 1, at("2026-10-07", 13))],
    )
    hs.jobs["J3"] = _job(
        db, shop, r[3], operator=b, machine=m2, received="2026-10-01", dispatched="2026-10-02",
        state="dispatched", reached=at("2026-10-02", 10),
        runs=[(1, "initial", None, at("2026-10-01", 15), (5.0, 2.0)),
              (2, "check", True, at("2026-10-02", 9), (0.5, 0.5))],
        corrections=[(1, 2, at("2026-10-01", 16))],
    )
    hs.jobs["J4"] = _job(
        db, shop, r[4], operator=b, machine=m2, received="2026-10-06", promised="2026-10-20",
        dispatched="2026-10-14", state="dispatched", reached=at("2026-10-08", 10),
        runs=[(1, "initial", None, at("2026-10-07", 9), (6.0, 3.0)),
              (2, "check", True, at("2026-10-08", 9), (0.5, 0.5)),
              (3, "check", True, at("2026-10-13", 9), (0.4, 0.4))],
        corrections=[(1, 2, at("2026-10-07", 14)), (2, 1, at("2026-10-12", 10))],
        transitions=[("certified", "on_machine", at("2026-10-09", 8), "key fitted wrong")],
    )
    hs.jobs["J5"] = _job(
        db, shop, r[5], operator=b, machine=m1, received="2026-09-28", promised="2026-09-30",
        dispatched="2026-10-01", state="dispatched", reached=at("2026-09-30", 10),
        runs=[(1, "initial", None, at("2026-09-28", 10), (40.0,)),
              (2, "check", False, at("2026-09-29", 9), (9.0,)),
              (3, "check", False, at("2026-09-29", 14), (4.0,)),
              (4, "check", True, at("2026-09-30", 9), (1.0,))],
        corrections=[(1, 1, at("2026-09-28", 11)), (2, 1, at("2026-09-29", 10)),
                     (3, 1, at("2026-09-29", 15))],
    )
    hs.jobs["J6"] = _job(
        db, shop, r[5], operator=a, machine=m2, received="2026-10-13", state="certified",
        kind="return", return_of_job_id=hs.jobs["J5"].id, reached=at("2026-10-14", 11),
        runs=[(1, "initial", None, at("2026-10-14", 9), (50.0,)),
              (2, "check", True, at("2026-10-14", 10, 30), (1.0,))],
        corrections=[(1, 1, at("2026-10-14", 10))],
    )
    hs.jobs["J7"] = _job(
        db, shop, r[6], operator=a, machine=m1, received="2026-10-15", state="rejected",
        reject_reason="cracked hub",
        transitions=[("booked_in", "rejected", at("2026-10-16"), "cracked hub")],
    )
    hs.jobs["J8"] = _job(
        db, shop, r[7], operator=b, machine=m2, received="2026-10-19", state="on_machine",
        runs=[(1, "initial", None, at("2026-10-20"), (7.0, 2.0))],
    )
    hs.jobs["J9"] = _job(db, shop, r[8], operator=a, machine=m1, received="2026-10-26",
                         state="booked_in")
    hs.jobs["J10"] = _job(
        db, shop, r[9], operator=b, machine=m1, received="2026-10-20", promised="2026-10-22",
        dispatched="2026-10-22", state="dispatched", reached=at("2026-10-21", 10),
        runs=[(1, "initial", None, at("2026-10-21", 8), (2.0, 1.0)),
              (2, "final", True, at("2026-10-21", 9), (2.0, 1.0)),
              (3, "final", True, at("2026-10-21", 16), (1.0, 1.0))],
        transitions=[("in_tolerance", "on_machine", at("2026-10-21", 15),
                      "wrong balancing speed")],
    )
    hs.jobs["J11"] = _job(
        db, shop, r[10], operator=a, machine=m2, received="2026-10-21", state="rejected",
        reject_reason="over machine capacity",
        runs=[(1, "initial", None, at("2026-10-22"), (9.0, 9.0))],
        transitions=[("on_machine", "rejected", at("2026-10-23"), "over machine capacity")],
    )
    hs.jobs["J12"] = _job(
        db, shop, r[11], operator=b, machine=m1, received="2026-10-27", state="rejected",
        transitions=[("booked_in", "rejected", at("2026-10-28"), "cracked hub")],
    )
    db.commit()
    return hs


# --------------------------------------------------------------------------- issue 17
REWORK_TODAY = dt.date(2026, 12, 15)
# (operator key, full name, jobs that reached tolerance in 2026, of them reworked, reason)
REWORK_PLAN: tuple[tuple[str, str, int, int, str], ...] = (
    ("A", "Ada High", 40, 16, "weight found loose"),
    ("B", "Ben Steady", 60, 3, "knocked in transport"),
    ("C", "Cy Small", 5, 2, "knocked in transport"),
    ("D", "Dee Steady", 60, 3, "knocked in transport"),
)
LAST_YEAR_JOBS, LAST_YEAR_FIRST_PASS = 40, 12  # 2025-01-06 … 2025-11-xx, operator B
LATE_LAST_YEAR_JOBS = 5  # received 2025-12-20: after the like-for-like cut of 12-15


@dataclass
class ReworkShop:
    """A constructed shop where one operator's rework is truly higher (see build_rework)."""

    users: dict[str, User] = field(default_factory=dict)
    machine: Machine | None = None
    rotor_types: list[Any] = field(default_factory=list)
    jobs: list[Job] = field(default_factory=list)


def _plain_job(db: Session, shop: Any, rotor: Any, operator: User, machine: Machine,
               received: dt.date, *, first_pass: bool, rework_reason: str | None) -> Job:
    """Received, corrected once, checked (twice when the first check failed), reached
    tolerance the next day at 12:00 and dispatched two days later; when reworked, reopened
    at 14:00 that day and run again at 14:30 and 15:00 (30 minutes of rework).

    Runs at 09:00 and 10:00 (and 11:00): gaps of one hour, counted as the 30-minute idle
    time each, so first-time work is 0.5 h (1.0 h when the first check failed).
    """
    nxt = received + dt.timedelta(days=1)
    day = nxt.isoformat()
    runs: list[RunSpec] = [(1, "initial", None, at(day, 9), (20.0,)),
                           (2, "check", first_pass, at(day, 10), (2.0,))]
    corrections = [(1, 1, at(day, 9, 30))]
    if not first_pass:
        runs.append((3, "check", True, at(day, 11), (1.0,)))
        corrections.append((2, 1, at(day, 10, 30)))
    transitions = []
    if rework_reason is not None:
        transitions.append(("in_tolerance", "on_machine", at(day, 14), rework_reason))
        seq = len(runs)
        runs += [(seq + 1, "check", True, at(day, 14, 30), (1.0,)),
                 (seq + 2, "final", True, at(day, 15), (1.0,))]
    return _job(db, shop, rotor, operator=operator, machine=machine, received=received.isoformat(),
                state="dispatched", dispatched=(received + dt.timedelta(days=3)).isoformat(),
                reached=at(day, 12), runs=runs, corrections=corrections, transitions=transitions)


def build_rework(db: Session, shop: Any, make_user: Callable[..., User]) -> ReworkShop:
    """2026 (today 2026-12-15): Ada High's 40 jobs have 16 reworked (40 %), the other
    operators' 3 of 60, 2 of 5 and 3 of 60; shop rate 24/165. Every 2026 job passed first
    time. 2025: 40 jobs of Ben Steady, 12 passed first time, plus 5 (all passing) received
    2025-12-20, after the like-for-like cut. Rotor types and the one machine in turn."""
    rs = ReworkShop()
    rs.machine = shop.machine(name="Rework shop M1")
    customer = shop.customer(name="Rework Shop Customer (invented)")
    rs.rotor_types = [shop.rotor_type(customer, part_number=f"RS-T{i}", description="fan")
                      for i in (1, 2, 3)]
    for key, name, _n, _k, _r in REWORK_PLAN:
        rs.users[key] = make_user("operator", full_name=name)
    k = 0
    for key, _name, n, reworked, reason in REWORK_PLAN:
        for i in range(n):
            received = dt.date(2026, 1, 5) + dt.timedelta(days=(2 * k) % 320)
            rotor = shop.rotor(rs.rotor_types[k % 3])
            rs.jobs.append(_plain_job(db, shop, rotor, rs.users[key], rs.machine, received,
                                      first_pass=True,
                                      rework_reason=reason if i < reworked else None))
            k += 1
    for i in range(LAST_YEAR_JOBS + LATE_LAST_YEAR_JOBS):
        late = i >= LAST_YEAR_JOBS
        received = (dt.date(2025, 12, 20) if late
                    else dt.date(2025, 1, 6) + dt.timedelta(days=7 * i))
        rotor = shop.rotor(rs.rotor_types[i % 3])
        rs.jobs.append(_plain_job(db, shop, rotor, rs.users["B"], rs.machine, received,
                                  first_pass=late or i < LAST_YEAR_FIRST_PASS,
                                  rework_reason=None))
    db.commit()
    return rs
