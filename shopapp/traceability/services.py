"""Traceability of the shop's equipment: machine verification register, proving rotors,
proving tests, shop arbors with their error history, and the key convention of rotor types.

Machine verification rules (ours; the test's idea is ISO 21940-21's, from memory):

- A machine's **due date** is the date of its last *passed* proving test on or
  before the day in question plus ``verification_interval_days``. A machine with
  no passed test yet counts from the day it was entered in the register (its
  commissioning, when the maker's acceptance test stands in), so a new machine
  must get its first proving test within one interval.
- On the due date itself the machine is still usable; **the day after the due
  date it is overdue** (``overdue_since = due_on + 1 day``). From
  ``due_soon_days`` (shop setting) before the due date up to the due date it is
  **due soon**; before that **current**.
- A machine whose latest test on or before the day **failed** is blocked from
  that test's date until a passed test is recorded.
- Overdue and failed machines cannot be chosen for new jobs, and a certificate
  is refused for a job whose final run was made while its machine was overdue
  or failed (:func:`require_machine_current`). Only the quality role clears it,
  by recording a passed proving test (``verify_machines``).
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session, selectinload

from shopapp.balancing import arbor as arbor_core
from shopapp.balancing import keys as keys_core
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.phasors import amplitude_angle, phasor
from shopapp.balancing.verification import (
    MinimumResidualTest,
    ReductionRatio,
    minimum_achievable_residual,
    unbalance_reduction_ratio,
)
from shopapp.core import audit
from shopapp.core.checks import Errors as _Errors
from shopapp.core.checks import date as _date
from shopapp.core.checks import number as _num
from shopapp.core.checks import text as _text
from shopapp.core.errors import ServiceError, ValidationFailed
from shopapp.core.permissions import require
from shopapp.core.settings import get_settings
from shopapp.models import (
    KEY_CONVENTIONS,
    Arbor,
    ArborErrorMeasurement,
    Job,
    Machine,
    MachineVerification,
    ProvingRotor,
    RotorType,
    User,
    utcnow,
)

STATES = ("current", "due_soon", "overdue", "failed")
BLOCKING_STATES = ("overdue", "failed")
CLEARED_BY = (
    "Only a quality manager can clear it, by recording a passed proving test of the machine "
    "in the verification register."
)
# Test unbalance for the U_mar test: 10-20 × the claimed U_mar (from memory of the
# ISO 21940-21 idea; outside it the page warns, it does not refuse).
TEST_UNBALANCE_FACTORS = (10.0, 20.0)
# Judgement: a two-plane proving rotor splits the claimed U_mar equally between its
# planes, as the standard allocates U_per to the planes of a symmetric rotor.
# Judgement: a stored arbor error holds for rotors within ±20 % of the mass it was
# measured with (its seat-eccentricity part scales with the rotor's mass).
ARBOR_MASS_TOLERANCE = 0.20


class MachineNotCurrent(ServiceError):
    """A machine is overdue (or failed) for its proving test on the day in question."""

    status = 409

    def __init__(self, standing: VerificationStatus) -> None:
        super().__init__(standing.message())
        self.standing = standing


# --------------------------------------------------------------------------- small checks


def _today() -> dt.date:
    return utcnow().date()


def _core(exc: BalancingInputError, prefix: str = "") -> ValidationFailed:
    field = f"{prefix}{exc.field}" if prefix else exc.field
    return ValidationFailed(field, exc.message)


# --------------------------------------------------------------------------- machine status


@dataclass(frozen=True)
class VerificationStatus:
    """A machine's standing in the verification register on ``on_date``.

    ``state``: ``current``, ``due_soon``, ``overdue`` or ``failed`` (module
    docstring). ``basis`` is ``"proving_test"`` (due date from the last passed
    test) or ``"register_entry"`` (no passed test yet). ``days_left`` is
    ``due_on − on_date`` (negative when overdue).
    """

    machine_id: int
    machine_name: str
    on_date: dt.date
    state: str
    due_on: dt.date
    overdue_since: dt.date | None
    basis: str
    last_passed_on: dt.date | None
    last_test_on: dt.date | None
    last_test_passed: bool | None
    days_left: int

    @property
    def blocks(self) -> bool:
        return self.state in BLOCKING_STATES

    @property
    def label(self) -> str:
        return {"current": "current", "due_soon": "due soon", "overdue": "overdue",
                "failed": "failed"}[self.state]

    def message(self) -> str:
        """Why the machine may not be used: which machine, since when, who clears it."""
        name = self.machine_name
        if self.state == "failed":
            return (f'Machine "{name}" failed its proving test on {self.last_test_on} and is '
                    f"blocked since then (checked for {self.on_date}). {CLEARED_BY}")
        if self.state == "overdue":
            last = (f"last passed test {self.last_passed_on}" if self.last_passed_on
                    else "no passed test on record")
            return (f'Machine "{name}" is overdue for its proving test since '
                    f"{self.overdue_since} (due {self.due_on}, {last}; checked for "
                    f"{self.on_date}). {CLEARED_BY}")
        return ""


def status_from_records(
    machine: Machine,
    records: Iterable[MachineVerification],
    on_date: dt.date,
    due_soon_days: int,
) -> VerificationStatus:
    """The register rule (module docstring) applied to ``records`` of ``machine``.

    Pure: no query. Records after ``on_date`` are ignored, so a past date gets
    the standing the machine had then.
    """
    known = sorted((r for r in records if r.performed_on <= on_date),
                   key=lambda r: (r.performed_on, r.id or 0))
    latest = known[-1] if known else None
    passed = [r for r in known if r.passed]
    last_passed = passed[-1].performed_on if passed else None
    interval = dt.timedelta(days=machine.verification_interval_days)
    if last_passed is not None:
        basis, due = "proving_test", last_passed + interval
    else:
        entered = (machine.created_at or utcnow()).astimezone(dt.UTC).date()
        basis, due = "register_entry", entered + interval
    since: dt.date | None = None
    if latest is not None and not latest.passed:
        state, since = "failed", latest.performed_on
    elif on_date > due:
        state, since = "overdue", due + dt.timedelta(days=1)
    elif on_date >= due - dt.timedelta(days=due_soon_days):
        state = "due_soon"
    else:
        state = "current"
    return VerificationStatus(
        machine_id=machine.id,
        machine_name=machine.name,
        on_date=on_date,
        state=state,
        due_on=due,
        overdue_since=since,
        basis=basis,
        last_passed_on=last_passed,
        last_test_on=latest.performed_on if latest else None,
        last_test_passed=latest.passed if latest else None,
        days_left=(due - on_date).days,
    )


def _records(session: Session, machine: Machine) -> list[MachineVerification]:
    return list(session.scalars(
        select(MachineVerification).where(MachineVerification.machine_id == machine.id)
        .order_by(MachineVerification.performed_on, MachineVerification.id)
    ))


def machine_status(session: Session, machine: Machine, on_date: dt.date | None = None
                   ) -> VerificationStatus:
    """The machine's standing on ``on_date`` (today when omitted); two queries."""
    day = on_date or _today()
    return status_from_records(machine, _records(session, machine), day,
                               get_settings(session).due_soon_days)


def machines_due_soon(session: Session, on_date: dt.date | None = None
                      ) -> list[VerificationStatus]:
    """Live machines that are due soon, overdue or failed on ``on_date``, soonest due first.

    Three queries whatever the number of machines (settings, machines, verifications).
    """
    day = on_date or _today()
    soon = get_settings(session).due_soon_days
    machines = session.scalars(
        select(Machine).where(Machine.archived.is_(False))
        .options(selectinload(Machine.verifications)).order_by(Machine.name)
    ).all()
    out = [status_from_records(m, m.verifications, day, soon) for m in machines]
    return sorted((s for s in out if s.state != "current"),
                  key=lambda s: (s.due_on, s.machine_name))


def register(session: Session, on_date: dt.date | None = None) -> list[VerificationStatus]:
    """Every live machine's standing on ``on_date``, by name (three queries)."""
    day = on_date or _today()
    soon = get_settings(session).due_soon_days
    machines = session.scalars(
        select(Machine).where(Machine.archived.is_(False))
        .options(selectinload(Machine.verifications)).order_by(Machine.name)
    ).all()
    return [status_from_records(m, m.verifications, day, soon) for m in machines]


def require_machine_current(session: Session, machine: Machine, on_date: dt.date
                            ) -> VerificationStatus:
    """Raise :class:`MachineNotCurrent` when ``machine`` is overdue or failed on ``on_date``.

    The message says which machine, since when, and who can clear it; returns
    the standing otherwise (current or due soon).
    """
    standing = machine_status(session, machine, on_date)
    if standing.blocks:
        raise MachineNotCurrent(standing)
    return standing


# --------------------------------------------------------------------------- proving rotors


PROVING_ROTOR_FIELDS = ("name", "mass_kg", "planes", "radius_1_mm", "radius_2_mm", "positions",
                        "notes")


def _clean_proving_rotor(values: Mapping[str, Any]) -> dict[str, Any]:
    unknown = sorted(set(values) - set(PROVING_ROTOR_FIELDS) - {"archived"})
    if unknown:
        raise ValidationFailed(unknown[0], "is not a proving-rotor field")
    e = _Errors()
    out: dict[str, Any] = {}
    out["name"] = _text(e, "name", values.get("name"), max_len=100, required=True)
    out["mass_kg"] = _num(e, "mass_kg", values.get("mass_kg"), above=0)
    planes = values.get("planes", 2)
    if planes not in (1, 2, "1", "2"):
        e.add("planes", "must be 1 or 2")
        planes = 2
    out["planes"] = int(planes)
    out["radius_1_mm"] = _num(e, "radius_1_mm", values.get("radius_1_mm"), above=0)
    r2 = _num(e, "radius_2_mm", values.get("radius_2_mm"), required=out["planes"] == 2, above=0)
    out["radius_2_mm"] = r2 if out["planes"] == 2 else None
    pos = values.get("positions", 8)
    try:
        pos_i = int(pos)
        if pos_i < 4 or pos_i != float(pos):
            raise ValueError
    except (TypeError, ValueError):
        e.add("positions", f"must be a whole number of at least 4, got {str(pos)[:20]!r}")
        pos_i = 8
    out["positions"] = pos_i
    out["notes"] = _text(e, "notes", values.get("notes", ""))
    if "archived" in values:
        out["archived"] = bool(values["archived"])
    e.raise_if_any()
    return out


def create_proving_rotor(session: Session, *, by: User, **fields: Any) -> ProvingRotor:
    """Add a proving rotor (name, mass_kg, planes, radius_1_mm, radius_2_mm, positions)."""
    require(by, "edit_machines")
    values = _clean_proving_rotor(fields)
    taken = session.scalar(select(ProvingRotor).where(ProvingRotor.name == values["name"]))
    if taken is not None:
        raise ValidationFailed("name", f"a proving rotor called {values['name']!r} exists")
    rotor = ProvingRotor(**values)
    session.add(rotor)
    session.flush()
    audit.record(session, by=by, entity="proving_rotor", entity_id=rotor.id, action="create",
                 after=audit.snapshot(rotor))
    return rotor


def proving_rotors(session: Session, *, include_archived: bool = False) -> list[ProvingRotor]:
    q = select(ProvingRotor).order_by(ProvingRotor.name)
    if not include_archived:
        q = q.where(ProvingRotor.archived.is_(False))
    return list(session.scalars(q))


# --------------------------------------------------------------------------- proving test


@dataclass(frozen=True)
class PlaneProving:
    """The U_mar test of one plane of the proving rotor."""

    plane: int
    claim_gmm: float
    result: MinimumResidualTest


@dataclass(frozen=True)
class ProvingTestResult:
    """Computed figures and verdict of a proving test (nothing stored).

    ``umar_gmm`` is the worst plane's U_mar, ``claimed_umar_gmm`` the machine's
    whole-rotor claim; ``urr`` the reduction-ratio test when one was made.
    """

    test_unbalance_gmm: float
    positions_deg: tuple[float, ...]
    planes: tuple[PlaneProving, ...]
    umar_gmm: float
    claimed_umar_gmm: float
    specific_gmm_per_kg: float
    urr: ReductionRatio | None
    passed: bool
    reasons: tuple[str, ...]
    warnings: tuple[str, ...]


def equally_spaced_deg(positions: int, first_deg: float = 0.0) -> tuple[float, ...]:
    """``positions`` angles ``first + k·360/positions``, degrees."""
    return tuple((first_deg + k * 360.0 / positions) % 360.0 for k in range(positions))


def claimed_umar_gmm(machine: Machine, proving_rotor: ProvingRotor) -> float | None:
    """The machine's claimed U_mar for this proving rotor, ``e_mar · m`` (g·mm), if claimed."""
    if machine.claimed_emar_gmm_per_kg is None:
        return None
    return machine.claimed_emar_gmm_per_kg * proving_rotor.mass_kg


def evaluate_proving_test(
    machine: Machine,
    proving_rotor: ProvingRotor,
    *,
    test_mass_g: Any,
    test_radius_mm: Any = None,
    indicated_gmm: Sequence[Sequence[Any]],
    indicated_angles_deg: Sequence[Sequence[Any]] | None = None,
    first_position_deg: float = 0.0,
    claimed_umar: Any = None,
    urr_before_gmm: Sequence[Any] | None = None,
    urr_after_gmm: Sequence[Any] | None = None,
    claimed_urr_pct: Any = None,
) -> ProvingTestResult:
    """Compute the proving test's figures and verdict (ISO 21940-21 idea, from memory).

    The test, as the register page prescribes it: the proving rotor balanced as
    well as the machine allows; a test mass ``test_mass_g`` at ``test_radius_mm``
    (``T = m·r``) fixed in turn at the rotor's ``positions`` equally spaced
    holes in each plane, the machine's indicated unbalance (g·mm, and angle
    when it shows one) logged at each. Per plane
    :func:`~shopapp.balancing.verification.minimum_achievable_residual` gives
    U_mar; it must not exceed the plane's share of the claim (whole claim for a
    one-plane rotor, half per plane for two — our rule). Optionally the
    reduction-ratio test: known unbalances per plane (``urr_before_gmm``), one
    correction step, the unbalance left (``urr_after_gmm``);
    ``URR = (1 − |after|/|before|)·100 %`` must reach the claimed URR.

    Raises
    ------
    ValidationFailed
        Bad or missing readings, named by field (``plane_1.readings`` …).
    """
    e = _Errors()
    mass = _num(e, "test_mass_g", test_mass_g, above=0)
    radius = _num(e, "test_radius_mm", test_radius_mm if test_radius_mm not in (None, "")
                  else proving_rotor.radius_1_mm, above=0)
    claim_default = claimed_umar_gmm(machine, proving_rotor)
    claim = _num(e, "claimed_umar_gmm", claimed_umar if claimed_umar not in (None, "")
                 else claim_default, above=0)
    if claim is None and claim_default is None and "claimed_umar_gmm" in e:
        e["claimed_umar_gmm"] = ("is required: the machine has no claimed e_mar on record; "
                                 "give the maker's U_mar for this proving rotor in g·mm")
    n_planes = proving_rotor.planes
    if len(indicated_gmm) != n_planes:
        e.add("readings", f"the proving rotor has {n_planes} plane(s); give readings for each")
    positions = equally_spaced_deg(proving_rotor.positions, first_position_deg)
    amps: list[list[float]] = []
    angs: list[list[float] | None] = []
    for p in range(min(n_planes, len(indicated_gmm))):
        row = list(indicated_gmm[p])
        field = f"plane_{p + 1}.readings"
        if len(row) != len(positions):
            e.add(field, f"need {len(positions)} readings, one per test-mass position")
            continue
        vals = [_num(e, f"plane_{p + 1}.amplitude_{k + 1}", v, minimum=0)
                for k, v in enumerate(row)]
        amps.append([v for v in vals if v is not None])
        if indicated_angles_deg is not None and p < len(indicated_angles_deg):
            arow = list(indicated_angles_deg[p])
            if all(a in (None, "") for a in arow):
                angs.append(None)
            elif any(a in (None, "") for a in arow) or len(arow) != len(positions):
                e.add(f"plane_{p + 1}.angles", "give an angle at every position, or none")
                angs.append(None)
            else:
                avals = [_num(e, f"plane_{p + 1}.angle_{k + 1}", a) for k, a in enumerate(arow)]
                angs.append([a for a in avals if a is not None])
        else:
            angs.append(None)
    urr_claim = _num(e, "claimed_urr_pct", claimed_urr_pct if claimed_urr_pct not in (None, "")
                     else machine.claimed_urr_pct, required=False, above=0, maximum=100)
    before = after = None
    has_urr = any(v not in (None, "") for v in (urr_before_gmm or ())) or any(
        v not in (None, "") for v in (urr_after_gmm or ()))
    if has_urr:
        before = [_num(e, f"urr_before_{k + 1}_gmm", v, above=0)
                  for k, v in enumerate(urr_before_gmm or ())]
        after = [_num(e, f"urr_after_{k + 1}_gmm", v, minimum=0)
                 for k, v in enumerate(urr_after_gmm or ())]
        if len(before) != n_planes or len(after) != n_planes:
            e.add("urr", f"give the unbalance before and after for each of the {n_planes} "
                  "plane(s)")
    e.raise_if_any()
    assert mass is not None and radius is not None and claim is not None
    t_gmm = mass * radius
    plane_claim = claim if n_planes == 1 else claim / 2.0
    planes: list[PlaneProving] = []
    reasons: list[str] = []
    warnings: list[str] = []
    lo, hi = TEST_UNBALANCE_FACTORS
    if not lo * plane_claim <= t_gmm <= hi * plane_claim:
        warnings.append(
            f"The test unbalance ({t_gmm:.4g} g·mm) is outside {lo:g}–{hi:g} × the plane's "
            f"claimed U_mar ({plane_claim:.4g} g·mm), the usual size (from memory of the "
            "ISO 21940-21 idea)."
        )
    for p in range(n_planes):
        try:
            res = minimum_achievable_residual(
                t_gmm, positions, amps[p], angs[p], claimed_umar_gmm=plane_claim,
                rotor_mass_kg=proving_rotor.mass_kg,
            )
        except BalancingInputError as exc:
            raise _core(exc, f"plane_{p + 1}.") from None
        planes.append(PlaneProving(p + 1, plane_claim, res))
        warnings.extend(f"Plane {p + 1}: {w}" for w in res.warnings)
        if not res.passed:
            reasons.append(f"plane {p + 1}: U_mar {res.umar_gmm:.4g} g·mm is above the claimed "
                           f"{plane_claim:.4g} g·mm")
    urr = None
    if has_urr:
        assert before is not None and after is not None
        try:
            urr = unbalance_reduction_ratio([v or 0.0 for v in before], [v or 0.0 for v in after],
                                            claimed_urr_percent=urr_claim)
        except BalancingInputError as exc:
            raise _core(exc, "urr.") from None
        warnings.extend(urr.warnings)
        if urr.passed is False:
            reasons.append(f"URR {urr.min_urr_percent:.1f} % is below the claimed "
                           f"{urr_claim:g} %")
    umar = max(pl.result.umar_gmm for pl in planes)
    return ProvingTestResult(
        test_unbalance_gmm=t_gmm,
        positions_deg=positions,
        planes=tuple(planes),
        umar_gmm=umar,
        claimed_umar_gmm=claim,
        specific_gmm_per_kg=sum(pl.result.umar_gmm for pl in planes) / proving_rotor.mass_kg,
        urr=urr,
        passed=not reasons,
        reasons=tuple(reasons),
        warnings=tuple(warnings),
    )


def record_proving_test(
    session: Session,
    machine: Machine,
    *,
    by: User,
    performed_on: dt.date,
    proving_rotor: ProvingRotor,
    test_mass_g: Any,
    test_radius_mm: Any = None,
    indicated_gmm: Sequence[Sequence[Any]],
    indicated_angles_deg: Sequence[Sequence[Any]] | None = None,
    first_position_deg: float = 0.0,
    claimed_umar: Any = None,
    urr_before_gmm: Sequence[Any] | None = None,
    urr_after_gmm: Sequence[Any] | None = None,
    claimed_urr_pct: Any = None,
    notes: str = "",
) -> MachineVerification:
    """Store a proving test of ``machine`` with its computed figures and verdict.

    See :func:`evaluate_proving_test` for the test; needs ``verify_machines``
    (quality). A passed test clears an overdue or failed machine from its date on.
    """
    require(by, "verify_machines")
    e = _Errors()
    day = _date(e, "performed_on", performed_on, not_after=_today())
    note = _text(e, "notes", notes)
    if machine.archived:
        e.add("machine_id", f"{machine.name} is archived")
    if proving_rotor is None or proving_rotor.archived:
        e.add("proving_rotor_id", "choose a proving rotor from the list")
    e.raise_if_any()
    assert day is not None
    result = evaluate_proving_test(
        machine, proving_rotor, test_mass_g=test_mass_g, test_radius_mm=test_radius_mm,
        indicated_gmm=indicated_gmm, indicated_angles_deg=indicated_angles_deg,
        first_position_deg=first_position_deg, claimed_umar=claimed_umar,
        urr_before_gmm=urr_before_gmm, urr_after_gmm=urr_after_gmm,
        claimed_urr_pct=claimed_urr_pct,
    )
    planes_json = []
    for pl in result.planes:
        fit = pl.result.fit
        planes_json.append({
            "plane": pl.plane,
            "indicated_gmm": [float(x) for x in indicated_gmm[pl.plane - 1]],
            "indicated_angles_deg": (
                None if indicated_angles_deg is None or pl.plane - 1 >= len(indicated_angles_deg)
                or all(a in (None, "") for a in indicated_angles_deg[pl.plane - 1])
                else [float(a) for a in indicated_angles_deg[pl.plane - 1]]),
            "umar_gmm": pl.result.umar_gmm,
            "claim_gmm": pl.claim_gmm,
            "passed": pl.result.passed,
            "indication_ratio": pl.result.indication_ratio,
            "fit_rms_relative": fit.fit_rms_relative,
            "method": fit.method,
            "angle_deg": fit.angle_deg,
        })
    readings: dict[str, Any] = {
        "test_mass_g": float(test_mass_g),
        "test_radius_mm": result.test_unbalance_gmm / float(test_mass_g),
        "test_unbalance_gmm": result.test_unbalance_gmm,
        "positions_deg": list(result.positions_deg),
        "planes": planes_json,
        "urr": None if result.urr is None else {
            "before_gmm": [float(v) for v in (urr_before_gmm or ())],
            "after_gmm": [float(v) for v in (urr_after_gmm or ())],
            "urr_percent": list(result.urr.urr_percent),
            "passed": result.urr.passed,
        },
        "reasons": list(result.reasons),
        "warnings": list(result.warnings),
    }
    row = MachineVerification(
        machine_id=machine.id,
        performed_on=day,
        proving_rotor=proving_rotor.name,
        proving_rotor_id=proving_rotor.id,
        proving_rotor_mass_kg=proving_rotor.mass_kg,
        measured_umar_gmm=result.umar_gmm,
        urr_pct=None if result.urr is None else result.urr.min_urr_percent,
        passed=result.passed,
        claimed_umar_gmm=result.claimed_umar_gmm,
        claimed_urr_pct=None if result.urr is None else result.urr.claimed_urr_percent,
        readings=readings,
        performed_by_id=by.id,
        notes=note,
    )
    session.add(row)
    session.flush()
    audit.record(session, by=by, entity="machine_verification", entity_id=row.id,
                 action="record_proving_test", after=audit.snapshot(row))
    return row


def verifications_of(session: Session, machine: Machine) -> list[MachineVerification]:
    """The machine's proving tests, newest first."""
    return list(session.scalars(
        select(MachineVerification).where(MachineVerification.machine_id == machine.id)
        .order_by(MachineVerification.performed_on.desc(), MachineVerification.id.desc())
    ))


# --------------------------------------------------------------------------- arbors


ARBOR_FIELDS = ("name", "description", "mass_kg", "notes", "archived")


def _clean_arbor(values: Mapping[str, Any], *, partial: bool = False) -> dict[str, Any]:
    unknown = sorted(set(values) - set(ARBOR_FIELDS))
    if unknown:
        raise ValidationFailed(unknown[0], "is not an arbor field")
    e = _Errors()
    out: dict[str, Any] = {}
    if not partial or "name" in values:
        out["name"] = _text(e, "name", values.get("name"), max_len=100, required=True)
    if not partial or "description" in values:
        out["description"] = _text(e, "description", values.get("description", ""), max_len=200)
    if not partial or "mass_kg" in values:
        out["mass_kg"] = _num(e, "mass_kg", values.get("mass_kg"), required=False, above=0)
    if not partial or "notes" in values:
        out["notes"] = _text(e, "notes", values.get("notes", ""))
    if "archived" in values:
        out["archived"] = bool(values["archived"])
    e.raise_if_any()
    return out


def _flush_named(session: Session, obj: Any, what: str) -> None:
    try:
        with session.begin_nested():
            session.flush()
    except IntegrityError:
        raise ValidationFailed("name", f"another {what} has that name") from None


def create_arbor(session: Session, *, by: User, **fields: Any) -> Arbor:
    """Add a shop arbor (name, description, mass_kg, notes); ``edit_machines``."""
    require(by, "edit_machines")
    values = _clean_arbor(fields)
    taken = session.scalar(select(Arbor).where(Arbor.name == values["name"]))
    if taken is not None:
        raise ValidationFailed("name", f"an arbor called {values['name']!r} exists")
    arbor = Arbor(**values)
    session.add(arbor)
    _flush_named(session, arbor, "arbor")
    audit.record(session, by=by, entity="arbor", entity_id=arbor.id, action="create",
                 after=audit.snapshot(arbor))
    return arbor


def update_arbor(session: Session, arbor: Arbor, *, by: User, **fields: Any) -> Arbor:
    """Change an arbor's fields (any of name, description, mass_kg, notes, archived)."""
    require(by, "edit_machines")
    values = _clean_arbor(fields, partial=True)
    before = audit.snapshot(arbor)
    for k, v in values.items():
        setattr(arbor, k, v)
    _flush_named(session, arbor, "arbor")
    audit.record(session, by=by, entity="arbor", entity_id=arbor.id, action="update",
                 before=before, after=audit.snapshot(arbor))
    return arbor


def arbors(session: Session, *, include_archived: bool = False) -> list[Arbor]:
    """Arbors by name, each with its measurements loaded (two queries)."""
    q = select(Arbor).options(selectinload(Arbor.measurements)).order_by(Arbor.name)
    if not include_archived:
        q = q.where(Arbor.archived.is_(False))
    return list(session.scalars(q))


def _run_phasors(e: _Errors, field: str, run: Sequence[Any], planes: int) -> list[complex]:
    """``[(amplitude, angle_deg), ...]`` per plane → phasors; errors into ``e``."""
    out: list[complex] = []
    if len(run) != planes:
        e.add(field, f"give a reading for each of the {planes} plane(s)")
        return out
    for p, pair in enumerate(run, start=1):
        try:
            amp, ang = pair
        except (TypeError, ValueError):
            e.add(f"{field}.plane_{p}", "give an amplitude and an angle")
            continue
        a = _num(e, f"{field}.plane_{p}.amplitude", amp, minimum=0)
        g = _num(e, f"{field}.plane_{p}.angle_deg", ang)
        if a is not None and g is not None:
            out.append(phasor(a, g))
    return out


def separate_index_runs(
    first_run: Sequence[Any],
    second_run: Sequence[Any],
    *,
    planes: int,
    index_deg: Any = 180.0,
    second_frame: str = "arbor",
) -> arbor_core.IndexSeparation:
    """Rotor unbalance and arbor error from two index runs (no storing).

    Runs are ``[(amplitude_gmm, angle_deg), ...]`` per plane; see
    :func:`shopapp.balancing.arbor.separate_arbor_error` for the frames.
    """
    e = _Errors()
    v1 = _run_phasors(e, "first_run", first_run, planes)
    v2 = _run_phasors(e, "second_run", second_run, planes)
    alpha = _num(e, "index_deg", index_deg)
    if second_frame not in arbor_core.FRAMES:
        e.add("second_frame", f"must be one of {', '.join(arbor_core.FRAMES)}")
    e.raise_if_any()
    try:
        return arbor_core.separate_arbor_error(v1, v2, index_deg=alpha or 0.0,
                                               second_frame=second_frame)
    except BalancingInputError as exc:
        raise _core(exc) from None


def record_arbor_error(
    session: Session,
    arbor: Arbor,
    *,
    by: User,
    measured_on: dt.date,
    first_run: Sequence[Any],
    second_run: Sequence[Any],
    planes: int | None = None,
    index_deg: Any = 180.0,
    second_frame: str = "arbor",
    rotor_mass_kg: Any = None,
    job: Job | None = None,
    notes: str = "",
) -> ArborErrorMeasurement:
    """Store an arbor error found by index balancing (readings in g·mm, arbor frame).

    ``planes`` defaults to the job's rotor planes (or the length of the runs);
    ``rotor_mass_kg`` to the job's rotor mass. Needs ``work_jobs``.
    """
    require(by, "work_jobs")
    e = _Errors()
    day = _date(e, "measured_on", measured_on, not_after=_today())
    note = _text(e, "notes", notes)
    if arbor.archived:
        e.add("arbor_id", f"arbor {arbor.name} is archived")
    if job is not None and job.arbor_id not in (None, arbor.id):
        e.add("arbor_id", f"job {job.number} is on another arbor")
    if rotor_mass_kg in (None, "") and job is not None:
        rotor_mass_kg = job.rotor.rotor_type.mass_kg
    mass = _num(e, "rotor_mass_kg", rotor_mass_kg, required=False, above=0)
    e.raise_if_any()
    n = planes or (job.rotor.rotor_type.planes if job is not None else len(first_run))
    sep = separate_index_runs(first_run, second_run, planes=n, index_deg=index_deg,
                              second_frame=second_frame)
    assert day is not None
    errs = [amplitude_angle(a) for a in sep.arbor]
    rot = [amplitude_angle(r) for r in sep.rotor]
    row = ArborErrorMeasurement(
        arbor_id=arbor.id,
        measured_on=day,
        planes=n,
        error_1_gmm=errs[0][0],
        error_1_angle_deg=errs[0][1],
        error_2_gmm=errs[1][0] if n == 2 else None,
        error_2_angle_deg=errs[1][1] if n == 2 else None,
        rotor_mass_kg=mass,
        readings={
            "index_deg": sep.index_deg,
            "second_frame": second_frame,
            "first": [[float(a), float(g)] for a, g in first_run],
            "second": [[float(a), float(g)] for a, g in second_run],
            "rotor_gmm": [[m, g] for m, g in rot],
            "warnings": list(sep.warnings),
        },
        job_id=job.id if job is not None else None,
        measured_by_id=by.id,
        notes=note,
    )
    session.add(row)
    session.flush()
    audit.record(session, by=by, entity="arbor_error_measurement", entity_id=row.id,
                 action="record", after=audit.snapshot(row),
                 job_id=job.id if job is not None else None)
    return row


def arbor_error_vector(m: ArborErrorMeasurement) -> tuple[complex, ...]:
    """The stored error as phasors per plane (arbor frame, g·mm)."""
    out = [phasor(m.error_1_gmm, m.error_1_angle_deg)]
    if m.planes == 2 and m.error_2_gmm is not None and m.error_2_angle_deg is not None:
        out.append(phasor(m.error_2_gmm, m.error_2_angle_deg))
    return tuple(out)


def latest_arbor_error(session: Session, arbor: Arbor, on_date: dt.date | None = None
                       ) -> ArborErrorMeasurement | None:
    """The arbor's latest measured error on or before ``on_date`` (any date when omitted)."""
    q = select(ArborErrorMeasurement).where(ArborErrorMeasurement.arbor_id == arbor.id)
    if on_date is not None:
        q = q.where(ArborErrorMeasurement.measured_on <= on_date)
    q = q.order_by(ArborErrorMeasurement.measured_on.desc(), ArborErrorMeasurement.id.desc())
    return session.scalars(q.limit(1)).first()


def arbor_mass_note(m: ArborErrorMeasurement, rotor_mass_kg: float) -> str:
    """A warning when the rotor's mass is far from the one the error was measured with."""
    if m.rotor_mass_kg is None:
        return ("The arbor error was measured without a rotor mass on record; its "
                "seat-eccentricity part holds only for rotors of similar mass.")
    if abs(rotor_mass_kg - m.rotor_mass_kg) > ARBOR_MASS_TOLERANCE * m.rotor_mass_kg:
        return (f"The arbor error was measured with a {m.rotor_mass_kg:g} kg rotor; this rotor "
                f"is {rotor_mass_kg:g} kg (more than {100 * ARBOR_MASS_TOLERANCE:.0f} % apart): "
                "measure the arbor again with this rotor (index runs).")
    return ""


# --------------------------------------------------------------------------- key convention


KEY_FIELDS = ("key_width_mm", "key_height_mm", "key_length_mm", "hub_length_mm",
              "key_radius_mm", "key_angle_deg")


def set_key_convention(
    session: Session, rotor_type: RotorType, *, by: User, convention: str, **dims: Any
) -> RotorType:
    """Set a rotor type's key convention and key size (``edit_registry``).

    ``dims``: any of key_width_mm, key_height_mm, key_length_mm, hub_length_mm,
    key_radius_mm (all mm, > 0) and key_angle_deg (0–360). With ``none`` the
    key size is cleared.
    """
    require(by, "edit_registry")
    unknown = sorted(set(dims) - set(KEY_FIELDS))
    if unknown:
        raise ValidationFailed(unknown[0], "is not a key field")
    e = _Errors()
    if convention not in KEY_CONVENTIONS:
        e.add("key_convention", f"choose one of {', '.join(KEY_CONVENTIONS)}")
    values: dict[str, float | None] = {}
    for f in KEY_FIELDS:
        if f == "key_angle_deg":
            v = _num(e, f, dims.get(f), required=False, minimum=0)
            if v is not None and v >= 360:
                e.add(f, f"must be below 360, got {v:g}")
        else:
            v = _num(e, f, dims.get(f), required=False, above=0)
        values[f] = v if convention != "none" else None
    e.raise_if_any()
    before = audit.snapshot(rotor_type, ("key_convention", *KEY_FIELDS))
    rotor_type.key_convention = convention
    for f, v in values.items():
        setattr(rotor_type, f, v)
    session.flush()
    audit.record(session, by=by, entity="rotor_type", entity_id=rotor_type.id,
                 action="set_key_convention", before=before,
                 after=audit.snapshot(rotor_type, ("key_convention", *KEY_FIELDS)))
    return rotor_type


@dataclass(frozen=True)
class KeyInfo:
    """What the job page and the certificate say about the key convention."""

    convention: str
    statement: str
    compensation: keys_core.KeyCompensation | None
    note: str


def key_info(rt: RotorType, correction_radius_mm: float | None = None) -> KeyInfo:
    """The rotor type's convention statement and, when its size is known, the compensation.

    The compensating mass is given at ``correction_radius_mm`` (plane 1's radius
    when omitted). Never raises: missing sizes become a note.
    """
    conv = rt.key_convention or "none"
    statement = keys_core.CONVENTION_STATEMENTS.get(conv, conv)
    if conv == "none":
        return KeyInfo(conv, statement, None, "")
    dims = [rt.key_width_mm, rt.key_height_mm, rt.key_length_mm, rt.hub_length_mm,
            rt.key_radius_mm]
    if any(d is None for d in dims):
        return KeyInfo(conv, statement, None,
                       "Key size, hub length or key radius not on record: the compensation for "
                       "a key longer or shorter than the hub is not computed.")
    try:
        comp = keys_core.key_compensation(
            conv, key_width_mm=rt.key_width_mm, key_height_mm=rt.key_height_mm,  # type: ignore[arg-type]
            key_length_mm=rt.key_length_mm, hub_length_mm=rt.hub_length_mm,  # type: ignore[arg-type]
            key_radius_mm=rt.key_radius_mm,  # type: ignore[arg-type]
            correction_radius_mm=correction_radius_mm or rt.radius_1_mm,
            key_angle_deg=rt.key_angle_deg or 0.0,
        )
    except BalancingInputError as exc:
        return KeyInfo(conv, statement, None, f"Key compensation not computed: {exc}")
    return KeyInfo(conv, statement, comp, "")
