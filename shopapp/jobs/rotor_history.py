"""Rotor history: every visit of one rotor (serial) in order, and the same for a rotor type.

Per visit: dates, initial unbalance per correction plane (g·mm and % of the
plane's limit), the residual of the last check run (% of limit and verdict),
the corrections (count, correction steps, masses), rework and returns marked,
and the certificate. Computed with :func:`shopapp.jobs.calc.evaluate`,
the same verdict the job page shows.

Growth note (our rule, common practice, no source): when the initial unbalance
of one plane rose by at least 10 % at each of the last two visits (three visits
in a row, each higher than the one before), the history says so in plain words
— build-up of deposits or wear is a likely cause and worth telling the customer.

Correction steps follow the shop measures (``services.measures``): the set of
corrections answering one run is one step; a correction recorded without its
run is a step of its own; only corrections up to the job's first
``in_tolerance`` count (later ones are rework).
"""

from __future__ import annotations

import datetime as dt
import itertools
import statistics
from collections import defaultdict
from collections.abc import Sequence

from sqlalchemy import select
from sqlalchemy.orm import Session, joinedload, selectinload

from shopapp.core.errors import NotFound, ValidationFailed
from shopapp.core.settings import get_settings
from shopapp.jobs import calc as job_calc
from shopapp.jobs import evidence as job_traceability
from shopapp.models import Certificate, Customer, InfluenceSet, Job, Rotor, RotorType, Run
from shopapp.reports.rotor_history import (
    GROWTH_RULE,
    Bin,
    RotorHistoryData,
    RotorTypeHistoryData,
    SerialSummary,
    Visit,
)

GROWTH_STEP = 1.10  # each visit at least 10 % above the one before
GROWTH_VISITS = 3  # three visits in a row
PCT_BINS = (0.0, 100.0, 300.0, 1000.0, 3000.0)  # initial unbalance, % of the plane limit
CYCLE_BINS = (0, 1, 2, 3, 4)  # 4 means "4 or more"


def find_rotor(session: Session, serial: str, *, customer: str | None = None) -> Rotor:
    """The rotor with this serial (of this customer, matched by name, case-insensitive).

    Raises
    ------
    NotFound
        No such serial (for that customer).
    ValidationFailed
        ``customer``: the serial exists at several customers and none was named.
    """
    stmt = (select(Rotor).join(Customer, Rotor.customer_id == Customer.id)
            .where(Rotor.serial_number == serial.strip())
            .options(joinedload(Rotor.customer), joinedload(Rotor.rotor_type))
            .order_by(Customer.name))
    if customer:
        stmt = stmt.where(Customer.name.ilike(customer.strip()))
    rotors = list(session.scalars(stmt))
    if not rotors:
        whose = f" of customer {customer!r}" if customer else ""
        raise NotFound(f"no rotor with serial {serial!r}{whose}")
    if len(rotors) > 1:
        names = ", ".join(r.customer.name for r in rotors)
        raise ValidationFailed(
            "customer", f"serial {serial!r} belongs to several customers ({names}): name one"
        )
    return rotors[0]


def _steps(job: Job) -> int:
    reached = job.first_in_tolerance_at
    keys = {c.run_id if c.run_id is not None else -c.id for c in job.corrections
            if reached is None or c.applied_at <= reached}
    return len(keys)


def _jobs(session: Session, where: object) -> list[Job]:
    return list(session.scalars(
        select(Job).where(where)  # type: ignore[arg-type]
        .options(joinedload(Job.return_of), joinedload(Job.machine),
                 joinedload(Job.rotor).joinedload(Rotor.rotor_type),
                 selectinload(Job.runs).selectinload(Run.readings),
                 selectinload(Job.corrections), selectinload(Job.imported_record))
        .order_by(Job.received_on, Job.id)
    ).unique())


def _sets_by_machine(session: Session, rotor_type_id: int) -> dict[int, list[InfluenceSet]]:
    out: dict[int, list[InfluenceSet]] = defaultdict(list)
    for s in session.scalars(select(InfluenceSet)
                             .where(InfluenceSet.rotor_type_id == rotor_type_id)):
        out[s.machine_id].append(s)
    return out


def _certificates(session: Session, job_ids: Sequence[int]) -> dict[int, str]:
    """Job id → "BC-… rev n (valid|void)" of its latest revision."""
    if not job_ids:
        return {}
    out: dict[int, str] = {}
    rows = session.execute(
        select(Certificate.job_id, Certificate.number, Certificate.revision, Certificate.state)
        .where(Certificate.job_id.in_(job_ids)).order_by(Certificate.revision)
    )
    for job_id, number, rev, state in rows:
        out[job_id] = f"{number} rev {rev} ({'valid' if state == 'issued' else 'void'})"
    return out


def _visit(job: Job, sets: Sequence[InfluenceSet], certificate: str,
           arbor_error_gmm: tuple[complex, ...] | None = None) -> Visit:
    # The arbor error the job subtracts, as on its page (jobs.evaluate).
    calc = job_calc.evaluate(job, runs=job.runs, corrections=job.corrections,
                             influence_sets=sets, arbor_error_gmm=arbor_error_gmm)
    planes = calc.planes
    limits = calc.tolerance.plane_limits_gmm if calc.tolerance is not None else ()
    initial_gmm: list[float | None] = [None] * planes
    first_initial = next((r for r in job.runs if r.purpose == "initial"), None)
    if first_initial is not None:
        v = calc.verdicts.get(first_initial.id)
        if v is not None and v.residual_gmm:
            initial_gmm = [abs(u) for u in v.residual_gmm]
    residual_pct: list[float | None] = [None] * planes
    passed = None
    if calc.last_check is not None and calc.last_check.judged and calc.last_check.residual_gmm:
        passed = bool(calc.last_check.passed)
        if limits:
            residual_pct = [100.0 * abs(u) / lim
                            for u, lim in zip(calc.last_check.residual_gmm, limits, strict=True)]
    record = job.imported_record
    if record is not None:
        # A past job from spreadsheets: no runs, so no initial reading (it stays out of
        # the growth note and of rotors getting worse); its final residual and verdict
        # are the old records', shown against this job's tolerance.
        passed = record.passed
        if limits:
            given = (record.residual_1_gmm, record.residual_2_gmm)[:planes]
            residual_pct = [None if u is None else 100.0 * u / lim
                            for u, lim in zip(given, limits, strict=True)]
    initial_pct = [None if u is None or not limits else 100.0 * u / limits[k]
                   for k, u in enumerate(initial_gmm)]
    mass = [0.0] * planes
    for c in job.corrections:
        if 1 <= c.plane <= planes:
            mass[c.plane - 1] += c.mass_g
    finished = job.dispatched_on.isoformat() if job.dispatched_on else ""
    return Visit(
        job_number=job.number,
        kind=job.kind,
        return_of=job.return_of.number if job.return_of is not None else "",
        received_on=job.received_on.isoformat(),
        finished_on=finished,
        state=job.state,
        reopen_count=job.reopen_count,
        rework=job.reopen_count > 0 or job.kind == "return",
        initial_gmm=tuple(initial_gmm),
        initial_pct=tuple(initial_pct),
        residual_pct=tuple(residual_pct),
        passed=passed,
        corrections=len(job.corrections),
        correction_steps=_steps(job),
        correction_mass_g=tuple(mass),
        certificate=certificate,
        imported=record is not None,
    )


def growth_note(visits: Sequence[Visit]) -> str:
    """The plain-language note when initial unbalance grew visit over visit ('' otherwise).

    Rule: in some plane, the last :data:`GROWTH_VISITS` visits with a known
    initial unbalance each rose by at least 10 % over the one before.
    """
    if not visits:
        return ""
    planes = len(visits[0].initial_gmm)
    found = []
    for k in range(planes):
        known = [(v.received_on, v.initial_gmm[k]) for v in visits
                 if k < len(v.initial_gmm) and v.initial_gmm[k] is not None]
        tail = known[-GROWTH_VISITS:]
        if len(tail) < GROWTH_VISITS:
            continue
        vals = [float(u) for _, u in tail if u is not None]
        if all(b >= a * GROWTH_STEP and a > 0 for a, b in itertools.pairwise(vals)):
            steps = " → ".join(f"{u:.0f}" for u in vals)
            found.append(f"plane {k + 1} ({steps} g·mm, visits of "
                         f"{tail[0][0]} to {tail[-1][0]})")
    if not found:
        return ""
    return ("The initial unbalance has grown at each of the last visits in "
            + " and ".join(found)
            + ". Build-up of deposits or wear is a likely cause: worth telling the customer, "
              "and worth a look at the rotor's condition before the next balance.")


def build(session: Session, rotor: Rotor) -> RotorHistoryData:
    """Every job of ``rotor`` in order of receipt, with the growth note."""
    rt = rotor.rotor_type
    jobs = _jobs(session, Job.rotor_id == rotor.id)
    sets = _sets_by_machine(session, rt.id)
    certs = _certificates(session, [j.id for j in jobs])
    arbor = job_traceability.arbor_errors_for(session, jobs)
    visits = tuple(_visit(j, sets.get(j.machine_id or -1, []), certs.get(j.id, ""),
                          arbor.get(j.id)) for j in jobs)
    settings = get_settings(session)
    return RotorHistoryData(
        shop_name=settings.shop_name,
        generated_at=_now_text(),
        customer_name=rotor.customer.name,
        serial_number=rotor.serial_number,
        rotor_part_number=rt.part_number,
        rotor_description=rt.description,
        planes=rt.planes,
        visits=visits,
        growth_note=growth_note(visits),
        growth_rule=GROWTH_RULE,
    )


def _bins_pct(values: Sequence[float]) -> tuple[Bin, ...]:
    out = []
    edges = (*PCT_BINS, None)
    for lo, hi in itertools.pairwise(edges):
        assert lo is not None
        label = f"{lo:.0f}–{hi:.0f} %" if hi is not None else f"{lo:.0f} % and more"
        count = sum(1 for v in values if v >= lo and (hi is None or v < hi))
        out.append(Bin(label, count))
    return tuple(out)


def _bins_cycles(values: Sequence[int]) -> tuple[Bin, ...]:
    out = []
    for c in CYCLE_BINS:
        last = c == CYCLE_BINS[-1]
        label = f"{c} or more" if last else str(c)
        out.append(Bin(label, sum(1 for v in values if (v >= c if last else v == c))))
    return tuple(out)


def _quantile(values: Sequence[float], q: float) -> float | None:
    """Linear interpolation between closest ranks (numpy's default), None when empty."""
    if not values:
        return None
    s = sorted(values)
    pos = q * (len(s) - 1)
    lo = int(pos)
    hi = min(lo + 1, len(s) - 1)
    return s[lo] + (s[hi] - s[lo]) * (pos - lo)


def build_for_type(session: Session, rotor_type: RotorType) -> RotorTypeHistoryData:
    """All serials of a rotor type: distribution of initial unbalance and correction steps."""
    jobs = _jobs(session, Job.rotor.has(Rotor.rotor_type_id == rotor_type.id))
    sets = _sets_by_machine(session, rotor_type.id)
    by_serial: dict[str, list[Visit]] = defaultdict(list)
    arbor = job_traceability.arbor_errors_for(session, jobs)
    for j in jobs:
        by_serial[j.rotor.serial_number].append(
            _visit(j, sets.get(j.machine_id or -1, []), "", arbor.get(j.id)))
    planes = rotor_type.planes
    all_visits = [v for vs in by_serial.values() for v in vs]
    pct_bins = []
    medians: list[float | None] = []
    p90s: list[float | None] = []
    for k in range(planes):
        pcts = [v.initial_pct[k] for v in all_visits if v.initial_pct[k] is not None]
        gmm = [v.initial_gmm[k] for v in all_visits if v.initial_gmm[k] is not None]
        pct_bins.append(_bins_pct([float(p) for p in pcts if p is not None]))
        medians.append(statistics.median(gmm) if gmm else None)  # type: ignore[type-var]
        p90s.append(_quantile([float(u) for u in gmm if u is not None], 0.9))
    serials = tuple(
        SerialSummary(serial, len(vs), vs[-1].received_on, sum(1 for v in vs if v.rework),
                      vs[-1].initial_gmm, bool(growth_note(vs)))
        for serial, vs in sorted(by_serial.items())
    )
    settings = get_settings(session)
    return RotorTypeHistoryData(
        shop_name=settings.shop_name,
        generated_at=_now_text(),
        customer_name=rotor_type.customer.name,
        rotor_part_number=rotor_type.part_number,
        rotor_description=rotor_type.description,
        planes=planes,
        jobs=len(all_visits),
        initial_pct_bins=tuple(pct_bins),
        initial_median_gmm=tuple(medians),
        initial_p90_gmm=tuple(p90s),
        cycle_bins=_bins_cycles([v.correction_steps for v in all_visits]),
        serials=serials,
        growth_rule=GROWTH_RULE,
    )


def _now_text() -> str:
    return dt.datetime.now(dt.UTC).replace(microsecond=0).isoformat()
