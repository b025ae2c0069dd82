"""Drifting the wrong way: rotors whose initial unbalance grows visit by visit, and
machines whose proving tests creep towards their claim.

Definitions (stated on the page and in the PDF):

a rotor's initial unbalance, % of its limit
    per visit (job), the first ``initial`` run's reading of each plane against that
    plane's permissible residual unbalance for the job (its tolerance, as on the job
    page: :func:`shopapp.jobs.calc.job_tolerance`); the larger of the planes. Only a
    reading in g·mm can be set against a limit in g·mm; where the machine reads µm or
    mm/s (influence coefficients needed) the reading itself is followed, in its unit,
    over the visits read in the latest visit's unit. A trend of the reading is a
    trend of the unbalance as long as the machine and speed stay the same.
rotor trend
    over a rotor's last :data:`DRIFT_VISITS` visits (at least three, the latest
    received in the period): the least-squares line of that value against the visit
    date, its slope per year and the slope's two-sided p-value
    (:func:`shopapp.measures.stats.trend`); "rising beyond chance" when the slope is
    positive and p < :data:`DRIFT_ALPHA`. With many rotors about one in twenty rises
    that far by chance alone: a question for the rotor, not a finding.
a machine's proving tests
    the measured U_mar of each proving test that recorded one, against the claim
    in force at the test (the stored claim, else the machine's claimed e_mar × the
    proving rotor's mass). A warning when the latest test is above the claim, or
    when the least-squares line through the tests (three or more) reaches the claim
    by the next due date (:meth:`shopapp.measures.stats.Trend.crosses`); the line
    carries no prediction band, so its p-value is shown beside it.

Two queries for the rotors (their visits; their rotor types) and one for the machines.
"""

from __future__ import annotations

import datetime as dt
import itertools
from collections import defaultdict
from collections.abc import Sequence
from dataclasses import dataclass, field
from operator import itemgetter
from typing import Any, NamedTuple

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from shopapp.balancing.errors import BalancingInputError
from shopapp.core.display import p_text
from shopapp.jobs import calc as job_calc
from shopapp.measures.periods import EVERYTHING, Period, Scope
from shopapp.measures.sql import scoped_facts
from shopapp.measures.stats import StatisticsInputError, Trend, trend, trends
from shopapp.models import (
    Customer,
    Job,
    JobFact,
    Machine,
    MachineVerification,
    Rotor,
    RotorType,
)
from shopapp.reports.shop_month import MachineStatus

DRIFT_VISITS = 8  # the most recent visits a rotor's trend is drawn through
#: How reading units are written (the stored "um" is a micrometre).
UNIT_TEXT = {"um": "µm"}
DRIFT_ALPHA = 0.05
DAYS_PER_YEAR = 365.25
GMM = "g·mm"
_JOB_TOLERANCE_COLUMNS = ("tolerance_method", "tolerance_grade", "journal_load_a_kg",
                          "journal_load_b_kg", "explicit_limit_1_gmm", "explicit_limit_2_gmm",
                          "service_speed_rpm", "balancing_speed_rpm")


class RotorVisit(NamedTuple):
    """One visit of a rotor (a named tuple: a busy shop's year makes 40 000 of them)."""

    job_number: str
    received_on: dt.date
    unit: str
    amplitude: float  # the larger plane reading of the first initial run
    percent_of_limit: float | None


@dataclass(frozen=True)
class RotorDrift:
    """One rotor's recent visits and the trend through them."""

    rotor_id: int
    serial_number: str
    customer: str
    rotor_type: str
    visits: tuple[RotorVisit, ...]  # oldest first: the visits the trend is drawn through
    measure: str  # "% of limit" or the reading unit
    slope_per_year: float
    p_value: float
    mean_interval_days: float

    @property
    def values(self) -> tuple[float, ...]:
        if self.measure == "% of limit":
            return tuple(v.percent_of_limit or 0.0 for v in self.visits)
        return tuple(v.amplitude for v in self.visits)

    @property
    def unit_text(self) -> str:
        """What the values are in: ``'% of limit'``, ``'µm'``, ``'mm/s'``, ``'g·mm'``."""
        return UNIT_TEXT.get(self.measure, self.measure)

    @property
    def rising(self) -> bool:
        """Rising beyond chance: a positive slope with p below :data:`DRIFT_ALPHA`."""
        return self.slope_per_year > 0 and self.p_value < DRIFT_ALPHA

    def as_json(self) -> dict[str, Any]:
        return {
            "rotor_id": self.rotor_id, "serial_number": self.serial_number,
            "customer": self.customer, "rotor_type": self.rotor_type, "measure": self.measure,
            "visits": [{"job_number": v.job_number, "received_on": v.received_on.isoformat(),
                        "unit": v.unit, "amplitude": v.amplitude,
                        "percent_of_limit": v.percent_of_limit} for v in self.visits],
            "slope_per_year": self.slope_per_year, "p_value": self.p_value,
            "mean_interval_days": self.mean_interval_days, "rising_beyond_chance": self.rising,
        }


@dataclass(frozen=True)
class ProvingTest:
    performed_on: dt.date
    umar_gmm: float
    claim_gmm: float | None


@dataclass(frozen=True)
class MachineDrift:
    """A machine's proving-test results over time against its claim."""

    machine_id: int
    name: str
    tests: tuple[ProvingTest, ...]
    claim_gmm: float | None  # the latest test's claim
    due_on: dt.date | None
    line: Trend | None  # through three or more tests
    warning: str  # "" when nothing to warn about

    def as_json(self) -> dict[str, Any]:
        return {
            "machine_id": self.machine_id, "machine": self.name, "claim_gmm": self.claim_gmm,
            "due_on": self.due_on.isoformat() if self.due_on else None,
            "tests": [{"performed_on": t.performed_on.isoformat(), "umar_gmm": t.umar_gmm,
                       "claim_gmm": t.claim_gmm} for t in self.tests],
            "slope_gmm_per_year": None if self.line is None
            else self.line.slope * DAYS_PER_YEAR,
            "p_value": None if self.line is None else self.line.p_value,
            "warning": self.warning or None,
        }


@dataclass
class Drift:
    rotors_examined: int = 0
    rotors: list[RotorDrift] = field(default_factory=list)  # rising ones, likeliest first
    machines: list[MachineDrift] = field(default_factory=list)

    def as_json(self) -> dict[str, Any]:
        return {"rotors_examined": self.rotors_examined,
                "rotors": [r.as_json() for r in self.rotors],
                "machines": [m.as_json() for m in self.machines],
                "alpha": DRIFT_ALPHA}


# ------------------------------------------------------------------------------- rotors
def _visit_rows(session: Session, p: Period, scope: Scope) -> list[Any]:
    """The last :data:`DRIFT_VISITS` visits of every rotor with three or more visits whose
    latest was received in ``p``: per visit its first initial run's plane readings."""
    F = JobFact
    # Rotors with a visit in the period (index on received_on), their visits counted through
    # (rotor_id, received_on): the cost follows the period, not the whole history.
    in_period = scoped_facts(
        select(F.rotor_id).where(F.received_on.between(p.start, p.end)), scope)
    candidates = scoped_facts(
        select(F.rotor_id).where(F.received_on <= p.end, F.rotor_id.in_(in_period))
        .group_by(F.rotor_id)
        .having(func.count() >= 3, func.max(F.received_on) >= p.start),
        scope,
    )
    ranked = (
        select(F.job_id, F.rotor_id, F.received_on, F.initial_amplitude_1.label("amp1"),
               F.initial_amplitude_2.label("amp2"), F.initial_unit.label("unit"),
               F.initial_unit_max.label("unit_max"), F.initial_units.label("units"),
               func.row_number().over(partition_by=F.rotor_id,
                                      order_by=(F.received_on.desc(), F.job_id.desc()))
               .label("rn"))
        .where(F.received_on <= p.end, F.rotor_id.in_(candidates))
        .subquery("ranked")
    )
    v = ranked.c
    # A visit whose first initial run has no readings is left out (units = 0). _visit reads
    # the columns by position (_NUMBER, _RECEIVED, _INPUTS, _TYPE_ID, _AMP1 …): keep in step.
    stmt = (
        select(
            v.rotor_id, v.job_id, Job.number, v.received_on,
            *(getattr(Job, c).label(c) for c in _JOB_TOLERANCE_COLUMNS),
            Rotor.serial_number, Rotor.rotor_type_id, Customer.name.label("customer"),
            RotorType.part_number.label("part_number"),
            v.amp1, v.amp2, v.unit, v.unit_max,
        )
        .select_from(ranked)
        .join(Job, Job.id == v.job_id)
        .join(Rotor, Rotor.id == v.rotor_id)
        .join(Customer, Customer.id == Rotor.customer_id)
        .join(RotorType, RotorType.id == Rotor.rotor_type_id)
        .where(v.rn <= DRIFT_VISITS, v.units > 0)
        .order_by(v.rotor_id, v.received_on, v.job_id)
    )
    return list(session.execute(stmt))


Limits = dict[tuple[Any, ...], tuple[float, ...] | None]


def _plane_limits(rt: RotorType, inputs: tuple[Any, ...], known: Limits
                  ) -> tuple[float, ...] | None:
    """The job's plane limits from its tolerance inputs (:data:`_JOB_TOLERANCE_COLUMNS`),
    worked out once per rotor type and inputs (a shop's visits share a handful of them:
    23 000 visits, a few hundred sets)."""
    key = (rt.id, *inputs)
    if key not in known:
        job = Job(**dict(zip(_JOB_TOLERANCE_COLUMNS, inputs, strict=True)))  # never added
        try:
            known[key] = job_calc.job_tolerance(job, rt).plane_limits_gmm
        except BalancingInputError:
            known[key] = None
    return known[key]


def _percent_of_limit(amps: tuple[float | None, float | None],
                      limits: tuple[float, ...] | None) -> float | None:
    """The larger plane reading as % of that plane's limit (g·mm readings only)."""
    if limits is None:
        return None
    best = None
    for amp, lim in zip(amps, limits, strict=False):
        if amp is not None and lim > 0:
            share = 100.0 * amp / lim
            if best is None or share > best:
                best = share
    return best


# Where _visit_rows puts each value (positions, not names: a year of a busy shop is 40 000
# rows, and a name lookup or a starred unpacking of a result row is slow).
_NUMBER, _RECEIVED = 2, 3
_INPUTS = slice(4, 4 + len(_JOB_TOLERANCE_COLUMNS))
_TYPE_ID = 4 + len(_JOB_TOLERANCE_COLUMNS) + 1
_AMP1, _AMP2, _UNIT, _UNIT_MAX = (_TYPE_ID + 3, _TYPE_ID + 4, _TYPE_ID + 5, _TYPE_ID + 6)


def _visit(row: Any, types: dict[int, RotorType], known: Limits) -> RotorVisit:
    """One row of :func:`_visit_rows` as a :class:`RotorVisit`."""
    amp1, amp2, unit, unit_max = row[_AMP1], row[_AMP2], row[_UNIT], row[_UNIT_MAX]
    percent = None
    if unit == GMM and unit_max == GMM:
        rt = types.get(row[_TYPE_ID])
        if rt is not None:
            limits = _plane_limits(rt, tuple(row[_INPUTS]), known)
            percent = _percent_of_limit((amp1, amp2), limits)
    return RotorVisit(row[_NUMBER], _as_date(row[_RECEIVED]),
                      unit if unit == unit_max else "mixed",
                      amp1 if amp2 is None else amp2 if amp1 is None else max(amp1, amp2),
                      percent)


def _as_date(value: Any) -> dt.date:
    return dt.date.fromisoformat(value) if isinstance(value, str) else value


def rotor_drift(
    session: Session, p: Period, scope: Scope = EVERYTHING
) -> tuple[int, list[RotorDrift]]:
    """Rotors examined, and those whose initial unbalance rises (slope > 0), likeliest first.

    The lines of all rotors are fitted together (:func:`shopapp.measures.stats.trends`);
    visits are only spelt out for the rotors that rise.
    """
    rows = _visit_rows(session, p, scope)
    type_ids = sorted({r.rotor_type_id for r in rows})
    types = {rt.id: rt for rt in session.scalars(
        select(RotorType).where(RotorType.id.in_(type_ids)))} if type_ids else {}
    known: Limits = {}
    picked: list[tuple[Any, list[RotorVisit], str, list[float]]] = []
    series: list[tuple[list[float], list[float]]] = []
    for _rotor_id, group in itertools.groupby(rows, key=itemgetter(0)):
        rotor_rows = list(group)
        visits = [_visit(r, types, known) for r in rotor_rows]
        chosen = _trend_series(visits)
        if chosen is not None:
            used, measure, xs, ys = chosen
            picked.append((rotor_rows[-1], used, measure, xs))
            series.append((xs, ys))
    out: list[RotorDrift] = []
    examined = 0
    for (last, used, measure, days), line in zip(picked, trends(series), strict=True):
        if line is None:
            continue
        examined += 1
        if line.slope <= 0:
            continue
        out.append(RotorDrift(last.rotor_id, last.serial_number, last.customer,
                              last.part_number, tuple(used), measure,
                              line.slope * DAYS_PER_YEAR, line.p_value,
                              (days[-1] - days[0]) / (len(days) - 1)))
    out.sort(key=lambda d: (d.p_value, d.serial_number))
    return examined, out


def _trend_series(
    visits: Sequence[RotorVisit],
) -> tuple[list[RotorVisit], str, list[float], list[float]] | None:
    """The visits a rotor's line is drawn through, what is followed, and the points.

    Every visit as % of its limit when each has one; else the latest visits read in the
    latest visit's unit. None when fewer than three remain, the unit is mixed or all
    fall on one day.
    """
    if all(v.percent_of_limit is not None for v in visits):
        used, measure = list(visits), "% of limit"
        ys = [v.percent_of_limit or 0.0 for v in used]
    else:
        unit = visits[-1].unit
        used = []
        for v in reversed(visits):  # the latest visits read in the latest visit's unit
            if v.unit != unit:
                break
            used.insert(0, v)
        measure = unit
        ys = [v.amplitude for v in used]
    days = [float(v.received_on.toordinal()) for v in used]
    if len(used) < 3 or measure == "mixed" or len(set(days)) < 2:
        return None
    return used, measure, days, ys


# ------------------------------------------------------------------------------- machines
def machine_drift(session: Session, machines: Sequence[MachineStatus],
                  today: dt.date) -> list[MachineDrift]:
    """Every machine's proving tests with a measured U_mar, and the warning (one query)."""
    claim = func.coalesce(
        MachineVerification.claimed_umar_gmm,
        Machine.claimed_emar_gmm_per_kg * MachineVerification.proving_rotor_mass_kg,
    )
    stmt = (
        select(Machine.id, Machine.name, Machine.verification_interval_days,
               MachineVerification.performed_on, MachineVerification.measured_umar_gmm,
               claim.label("claim"))
        .join(MachineVerification, MachineVerification.machine_id == Machine.id)
        .where(MachineVerification.measured_umar_gmm.is_not(None))
        .order_by(Machine.name, Machine.id, MachineVerification.performed_on,
                  MachineVerification.id)
    )
    due = {m.machine_id: m.due_on for m in machines}
    tests: dict[tuple[int, str, int], list[ProvingTest]] = defaultdict(list)
    for row in session.execute(stmt):
        tests[(row.id, row.name, row.verification_interval_days)].append(ProvingTest(
            _as_date(row.performed_on), float(row.measured_umar_gmm),
            None if row.claim is None else float(row.claim)))
    out = []
    for (machine_id, name, interval), done in tests.items():
        due_on = due.get(machine_id) or (done[-1].performed_on + dt.timedelta(days=interval))
        out.append(_machine_drift(machine_id, name, done, due_on, today))
    return out


def _machine_drift(machine_id: int, name: str, done: Sequence[ProvingTest], due_on: dt.date,
                   today: dt.date) -> MachineDrift:
    latest = done[-1]
    claim = latest.claim_gmm
    line = None
    days = [t.performed_on.toordinal() for t in done]
    if len(done) >= 3 and len(set(days)) >= 2:
        try:
            line = trend(days, [t.umar_gmm for t in done])
        except StatisticsInputError:
            line = None
    warning = ""
    if claim is not None and latest.umar_gmm > claim:
        warning = (f"the latest proving test ({latest.performed_on.isoformat()}) is above "
                   "the claim")
    elif claim is not None and line is not None and line.slope > 0:
        until = max(due_on, today, latest.performed_on).toordinal()
        if line.crosses(claim, before_x=until):
            warning = (f"the line through the proving tests reaches the claim by "
                       f"{max(due_on, today).isoformat()}, the next due date "
                       f"(slope {p_text(line.p_value)})")
    return MachineDrift(machine_id, name, tuple(done), claim, due_on, line, warning)


def drift(session: Session, p: Period, scope: Scope, machines: Sequence[MachineStatus],
          today: dt.date) -> Drift:
    """Rotors and machines drifting the wrong way (three queries)."""
    examined, rotors = rotor_drift(session, p, scope)
    return Drift(examined, rotors, machine_drift(session, machines, today))
