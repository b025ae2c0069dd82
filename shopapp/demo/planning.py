"""Each demo job's dates and fate, decided before its physics.

New jobs arrive on random working days of the history, on a rotor type
chosen by its weight in the scenario and a serial that is not in the shop
then; a few dispatched jobs come back as customer returns. Each plan says
when the job is booked in, promised, started, certified and dispatched, and
whether it is rejected, reopened after a disturbance or reissued.
:mod:`shopapp.demo.history` plays it.
"""

from __future__ import annotations

import bisect
import datetime as dt
import heapq
from dataclasses import dataclass

import numpy as np

from shopapp.demo import physics as ph
from shopapp.demo import scenario as sc
from shopapp.demo.days import WORKDAY_START_MIN, add_working_days, at
from shopapp.demo.shop import Shop

RETURN_RATE = 0.05  # share of dispatched jobs that come back as a customer return


@dataclass
class Plan:
    """One job's dates and fate, decided before its physics."""

    idx: int
    rotor: ph.RotorModel
    kind: str
    parent: Plan | None
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
    reopen: str = ""  # "" | disturbed_tol | disturbed_cert | disturbed_disp
    reopen_day: dt.date | None = None
    certify2_day: dt.date | None = None
    dispatch2_day: dt.date | None = None
    final_runs: int = 0
    reissue_day: dt.date | None = None
    final_day: dt.date | None = None  # when the rotor leaves (dispatch or rejection)
    job_id: int = 0
    number: str = ""
    result_state: str = ""
    result_dispatched_on: dt.date | None = None


def plan(shop: Shop, n_new: int, runs_per_job: int | None) -> list[Plan]:
    """About ``n_new`` new jobs over the history, and the returns some of them cause."""
    rng = shop.rng
    days = []
    d = add_working_days(shop.start, 0)
    while d <= shop.end:
        days.append(d)
        d = add_working_days(d, 1)
    counts = [0] * len(days)
    for _ in range(n_new):
        counts[rng.randrange(len(days))] += 1
    heap: list[tuple[dt.date, int, int, Plan | None]] = []
    order = 0
    for day, k in zip(days, counts, strict=True):
        for _ in range(k):
            heap.append((day, 0, order, None))
            order += 1
    heapq.heapify(heap)
    weights = [tm.spec.weight for tm in shop.types]
    cum = list(np.cumsum(weights))
    plans: list[Plan] = []
    operators = [i for i, p in enumerate(sc.PEOPLE) if p.role == "operator"]
    quality = [p.role for p in sc.PEOPLE].index("quality")
    while heap:
        day, _prio, _o, parent = heapq.heappop(heap)
        if parent is None:
            tm = shop.types[bisect.bisect_right(cum, rng.random() * cum[-1]) if cum[-1] else 0]
            rotor = _pick_rotor(shop, tm, day)
            kind = "new"
        else:
            rotor = parent.rotor
            rotor.reserved = False
            kind = "return"
        op = quality if (rotor.type.spec.customer in ("srs", "lgw") and rng.random() < 0.4) \
            else operators[rng.randrange(len(operators))]
        p = _plan_dates(shop, len(plans), rotor, kind, parent, day, op, runs_per_job)
        plans.append(p)
        rotor.free_from = (p.final_day + dt.timedelta(days=1)) if p.final_day else dt.date.max
        rotor.visits += 1
        if (kind == "new" and p.fate == "normal" and p.final_day is not None
                and rng.random() < RETURN_RATE):
            ret = add_working_days(p.final_day, rng.randint(8, 80))
            if ret <= shop.end:
                rotor.reserved = True
                heapq.heappush(heap, (ret, 1, order, p))
                order += 1
    return plans


def _pick_rotor(shop: Shop, tm: ph.TypeModel, day: dt.date) -> ph.RotorModel:
    """A serial of the type that is not in the shop (a few random tries), or a new one."""
    rng = shop.rng
    fleet = tm.fleet
    if not fleet or (len(fleet) < tm.fleet_target and rng.random() < 0.35):
        return shop.new_rotor(tm)
    for _ in range(8):
        r = fleet[rng.randrange(len(fleet))]
        if r.free_from <= day and not r.reserved:
            return r
    return shop.new_rotor(tm)


def _in_lapse(tm: ph.TypeModel, day: dt.date | None) -> bool:
    """On (or a few days before) the days its machine was overdue."""
    lapse = tm.machine.lapse
    return (lapse is not None and day is not None
            and lapse[0] - dt.timedelta(days=3) < day < lapse[1])


def _plan_dates(shop: Shop, idx: int, rotor: ph.RotorModel, kind: str, parent: Plan | None,
                day: dt.date, operator: int, runs_per_job: int | None) -> Plan:
    rng = shop.rng
    tm = rotor.type
    rush = rng.random() < 0.12
    booked = at(day, WORKDAY_START_MIN + rng.uniform(0, 150))
    promised = add_working_days(day, 3 if rush else rng.choice((5, 6, 7, 8)))
    notes = rng.choice(sc.RETURN_NOTES) if kind == "return" else rng.choice(sc.JOB_NOTES)
    if rush and not notes:
        notes = "Rush: customer's line is down."
    ref = parent.order_ref if parent else f"PO-{rng.randint(10000, 99999)}"
    p = Plan(idx, rotor, kind, parent, day, booked, promised, operator, notes, ref)
    r = rng.random()
    wait = 0 if rush else rng.choice((0, 0, 1, 1, 2, 2, 3, 4, 5, 6, 8))
    start_day = add_working_days(day, wait)
    if start_day == day:
        start_min = (booked - at(day, 0)).total_seconds() / 60 + rng.uniform(30, 240)
    else:
        start_min = WORKDAY_START_MIN + rng.uniform(15, 390)
    p.start_at = at(start_day, min(start_min, 15 * 60))
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
    p.final_runs = 0 if runs_per_job else (rng.choice((1, 2)) if rng.random() < 0.25 else 0)
    p.certify_day = add_working_days(pass_day, rng.choice((0, 0, 1)))
    # Dispatch waits for the customer's transport.
    p.dispatch_day = add_working_days(p.certify_day,
                                      0 if rush else rng.choice((0, 1, 1, 2, 3, 4)))
    p.final_day = p.dispatch_day
    lapse = tm.machine.lapse
    if lapse is not None and _in_lapse(tm, pass_day):
        # Balanced while its machine's verification had lapsed: quality holds the
        # certificate until the machine is re-verified (history.JobSim.machine_current),
        # then the check run is repeated; the rotor leaves a few days after that.
        p.final_day = add_working_days(lapse[1], 4)
        return p
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
    if p.reopen and _in_lapse(tm, p.reopen_day):
        p.reopen, p.reopen_day = "", None  # no rework on a machine that is overdue then
    if p.reopen:
        assert p.reopen_day is not None
        p.certify2_day = add_working_days(p.reopen_day, rng.choice((0, 1)))
        p.dispatch2_day = add_working_days(p.certify2_day, rng.choice((0, 1, 2)))
        p.final_day = p.dispatch2_day
    elif rng.random() < 0.04:
        p.reissue_day = add_working_days(p.certify_day, rng.randint(1, 20))
    return p
