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
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session, selectinload

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.verification import (
    INDICATION_TOLERANCE,
    MinimumResidualTest,
    ReductionRatio,
    minimum_achievable_residual,
    unbalance_reduction_ratio,
)
from shopapp.core import audit, checks
from shopapp.core.clock import shop_date, shop_today
from shopapp.core.display import counted, plain, quantity
from shopapp.core.errors import ServiceError, ValidationFailed
from shopapp.core.permissions import require
from shopapp.core.settings import get_settings
from shopapp.models import (
    Machine,
    MachineVerification,
    ProvingRotor,
    User,
    utcnow,
)
from shopapp.traceability.common import add_named, core_error

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
# The proposed test mass puts the test unbalance in the middle of that range.
PROPOSED_TEST_FACTOR = 15.0


class MachineNotCurrent(ServiceError):
    """A machine is overdue (or failed) for its proving test on the day in question."""

    status = 409

    def __init__(self, standing: VerificationStatus) -> None:
        super().__init__(standing.message())
        self.standing = standing



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
        entered = shop_date(machine.created_at or utcnow())
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


def records_of(session: Session, machine: Machine) -> list[MachineVerification]:
    return list(session.scalars(
        select(MachineVerification).where(MachineVerification.machine_id == machine.id)
        .order_by(MachineVerification.performed_on, MachineVerification.id)
    ))


def machine_status(session: Session, machine: Machine, on_date: dt.date | None = None
                   ) -> VerificationStatus:
    """The machine's standing on ``on_date`` (today when omitted); two queries."""
    day = on_date or shop_today()
    return status_from_records(machine, records_of(session, machine), day,
                               get_settings(session).due_soon_days)


def register(session: Session, on_date: dt.date | None = None) -> list[VerificationStatus]:
    """Every live machine's standing on ``on_date``, by name (three queries)."""
    day = on_date or shop_today()
    soon = get_settings(session).due_soon_days
    machines = session.scalars(
        select(Machine).where(Machine.archived.is_(False))
        .options(selectinload(Machine.verifications)).order_by(Machine.name)
    ).all()
    return [status_from_records(m, m.verifications, day, soon) for m in machines]


def machines_due_soon(session: Session, on_date: dt.date | None = None
                      ) -> list[VerificationStatus]:
    """Live machines that are due soon, overdue or failed on ``on_date``, soonest due first.

    Three queries whatever the number of machines (settings, machines, verifications).
    """
    return sorted((s for s in register(session, on_date) if s.state != "current"),
                  key=lambda s: (s.due_on, s.machine_name))


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
    e = checks.Errors()
    out: dict[str, Any] = {}
    out["name"] = checks.text(e, "name", values.get("name"), max_len=100, required=True)
    out["mass_kg"] = checks.number(e, "mass_kg", values.get("mass_kg"), above=0)
    planes = values.get("planes", 2)
    if planes not in (1, 2, "1", "2"):
        e.add("planes", "must be 1 or 2")
        planes = 2
    out["planes"] = int(planes)
    out["radius_1_mm"] = checks.number(e, "radius_1_mm", values.get("radius_1_mm"), above=0)
    r2 = checks.number(e, "radius_2_mm", values.get("radius_2_mm"),
                       required=out["planes"] == 2, above=0)
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
    out["notes"] = checks.text(e, "notes", values.get("notes", ""))
    if "archived" in values:
        out["archived"] = bool(values["archived"])
    e.raise_if_any()
    return out


def create_proving_rotor(session: Session, *, by: User, **fields: Any) -> ProvingRotor:
    """Add a proving rotor (name, mass_kg, planes, radius_1_mm, radius_2_mm, positions)."""
    require(by, "edit_machines")
    values = _clean_proving_rotor(fields)
    rotor = ProvingRotor(**values)
    add_named(session, rotor, by=by, entity="proving_rotor", noun="proving rotor",
              taken=f"a proving rotor called {values['name']!r} exists")
    return rotor


def proving_rotors(session: Session, *, include_archived: bool = False) -> list[ProvingRotor]:
    q = select(ProvingRotor).order_by(ProvingRotor.name)
    if not include_archived:
        q = q.where(ProvingRotor.archived.is_(False))
    return list(session.scalars(q))


def fits_mass_range(machine: Machine, proving_rotor: ProvingRotor) -> bool:
    """Whether the proving rotor's mass lies within the machine's mass range."""
    return machine.min_mass_kg <= proving_rotor.mass_kg <= machine.max_mass_kg


def proposed_proving_rotor(machine: Machine, rotors: Sequence[ProvingRotor]
                           ) -> ProvingRotor | None:
    """The proving rotor the test form proposes for ``machine``, or None when none fits.

    Of the rotors within the machine's mass range, the one nearest the middle
    of the range on a log scale (a machine's range spans decades; common
    practice, no source: prove the machine with a rotor it is meant to carry,
    not one at the edge of its range). The lower end is taken as at least 1 %
    of the upper, so a range from 0 kg has a middle.
    """
    fitting = [r for r in rotors if fits_mass_range(machine, r)]
    if not fitting:
        return None
    low = max(machine.min_mass_kg, 0.01 * machine.max_mass_kg)
    middle = math.sqrt(low * machine.max_mass_kg)
    return min(fitting, key=lambda r: (abs(math.log(r.mass_kg / middle)), r.name))


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


@dataclass(frozen=True)
class ProvingTestDefaults:
    """What the proving-test form proposes for a machine and proving rotor (all may be None).

    ``test_mass_g`` puts the test unbalance at :data:`PROPOSED_TEST_FACTOR` × the
    plane's share of the claimed U_mar at the rotor's plane-1 radius, rounded to
    3 significant figures (what a shop scale shows).
    """

    test_radius_mm: float | None
    claimed_umar_gmm: float | None
    test_mass_g: float | None
    claimed_urr_pct: float | None

    def as_form(self) -> dict[str, str]:
        """The figures as the form's fields show them (the page's script fills them in)."""
        return {name: plain(value) if value is not None else ""
                for name, value in (("test_radius_mm", self.test_radius_mm),
                                    ("claimed_umar", self.claimed_umar_gmm),
                                    ("test_mass_g", self.test_mass_g),
                                    ("claimed_urr_pct", self.claimed_urr_pct))}


def _three_figures(value: float) -> float:
    return round(value, 2 - math.floor(math.log10(abs(value)))) if value else value


def proving_test_defaults(machine: Machine, proving_rotor: ProvingRotor | None
                          ) -> ProvingTestDefaults:
    """The proposed figures of a new proving test (nothing stored).

    The test mass: the middle (15 ×) of the usual 10–20 × the plane's claimed
    U_mar (from memory of the ISO 21940-21 idea), a two-plane rotor taking half
    the claim per plane (:func:`evaluate_proving_test`). ``claimed_umar_gmm``
    is for the whole rotor; ``test_mass_g`` and ``test_radius_mm`` are per plane.
    """
    if proving_rotor is None:
        return ProvingTestDefaults(None, None, None, machine.claimed_urr_pct)
    claim = claimed_umar_gmm(machine, proving_rotor)
    mass = None
    if claim is not None:
        share = claim if proving_rotor.planes == 1 else claim / 2.0
        mass = _three_figures(PROPOSED_TEST_FACTOR * share / proving_rotor.radius_1_mm)
    return ProvingTestDefaults(proving_rotor.radius_1_mm, claim, mass, machine.claimed_urr_pct)


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
    e = checks.Errors()
    mass = checks.number(e, "test_mass_g", test_mass_g, above=0)
    radius = checks.number(e, "test_radius_mm", test_radius_mm if test_radius_mm not in (None, "")
                           else proving_rotor.radius_1_mm, above=0)
    claim_default = claimed_umar_gmm(machine, proving_rotor)
    claim = checks.number(e, "claimed_umar_gmm", claimed_umar if claimed_umar not in (None, "")
                          else claim_default, above=0)
    if claim is None and claim_default is None and "claimed_umar_gmm" in e:
        e["claimed_umar_gmm"] = ("is required: the machine has no claimed e_mar on record; "
                                 "give the maker's U_mar for this proving rotor in g·mm")
    n_planes = proving_rotor.planes
    if len(indicated_gmm) != n_planes:
        e.add("readings", f"the proving rotor has {counted(n_planes, 'plane')}; give readings "
                          "for each")
    # Checked like any typed angle: "nan" or "abc" were once stored as 0°.
    first = checks.number(e, "first_position_deg", first_position_deg,
                          minimum=-360.0, maximum=360.0, unit="°")
    positions = equally_spaced_deg(proving_rotor.positions, first if first is not None else 0.0)
    amps: list[list[float]] = []
    angs: list[list[float] | None] = []
    for p in range(min(n_planes, len(indicated_gmm))):
        row = list(indicated_gmm[p])
        field = f"plane_{p + 1}.readings"
        if len(row) != len(positions):
            e.add(field, f"need {len(positions)} readings, one per test-mass position")
            continue
        vals = [checks.number(e, f"plane_{p + 1}.amplitude_{k + 1}", v, minimum=0)
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
                avals = [checks.number(e, f"plane_{p + 1}.angle_{k + 1}", a)
                         for k, a in enumerate(arow)]
                angs.append([a for a in avals if a is not None])
        else:
            angs.append(None)
    urr_claim = checks.number(
        e, "claimed_urr_pct",
        claimed_urr_pct if claimed_urr_pct not in (None, "") else machine.claimed_urr_pct,
        required=False, above=0, maximum=100)
    before = after = None
    has_urr = any(v not in (None, "") for v in (urr_before_gmm or ())) or any(
        v not in (None, "") for v in (urr_after_gmm or ()))
    if has_urr:
        before = [checks.number(e, f"urr_before_{k + 1}_gmm", v, above=0)
                  for k, v in enumerate(urr_before_gmm or ())]
        after = [checks.number(e, f"urr_after_{k + 1}_gmm", v, minimum=0)
                 for k, v in enumerate(urr_after_gmm or ())]
        if len(before) != n_planes or len(after) != n_planes:
            e.add("urr", "give the unbalance before and after for every plane (the proving "
                  f"rotor has {counted(n_planes, 'plane')})")
    e.raise_if_any()
    assert mass is not None and radius is not None and claim is not None
    t_gmm = mass * radius
    plane_claim = claim if n_planes == 1 else claim / 2.0
    planes: list[PlaneProving] = []
    reasons: list[str] = []
    warnings: list[str] = []
    if not fits_mass_range(machine, proving_rotor):
        warnings.append(
            f"The proving rotor {proving_rotor.name} ({quantity(proving_rotor.mass_kg, 'kg')}) "
            f"is outside {machine.name}'s mass range ({plain(machine.min_mass_kg)}–"
            f"{quantity(machine.max_mass_kg, 'kg')}): the test does not prove the machine for "
            "the rotors it carries."
        )
    lo, hi = TEST_UNBALANCE_FACTORS
    if not lo * plane_claim <= t_gmm <= hi * plane_claim:
        warnings.append(
            f"The test unbalance ({quantity(t_gmm, 'g·mm')}) is outside {plain(lo)}–{plain(hi)} "
            f"× the plane's claimed U_mar ({quantity(plane_claim, 'g·mm')}), the usual size "
            "for the ISO 21940-21 test."
        )
    for p in range(n_planes):
        try:
            res = minimum_achievable_residual(
                t_gmm, positions, amps[p], angs[p], claimed_umar_gmm=plane_claim,
                rotor_mass_kg=proving_rotor.mass_kg,
            )
        except BalancingInputError as exc:
            raise core_error(exc, f"plane_{p + 1}.") from None
        planes.append(PlaneProving(p + 1, plane_claim, res))
        warnings.extend(f"Plane {p + 1}: {w}" for w in res.warnings)
        if not res.within_claim:
            reasons.append(f"plane {p + 1}: U_mar {quantity(res.umar_gmm, 'g·mm')} is above "
                           f"the claimed {quantity(plane_claim, 'g·mm')}")
        if not res.reads_true:
            reasons.append(f"plane {p + 1}: the machine indicated the known test unbalance as "
                           f"{plain(round(100 * res.indication_ratio))} % of its value "
                           f"(±{plain(round(100 * INDICATION_TOLERANCE))} % allowed)")
    urr = None
    if has_urr:
        assert before is not None and after is not None
        try:
            urr = unbalance_reduction_ratio([v or 0.0 for v in before], [v or 0.0 for v in after],
                                            claimed_urr_percent=urr_claim)
        except BalancingInputError as exc:
            raise core_error(exc, "urr.") from None
        warnings.extend(urr.warnings)
        if urr.passed is False:
            reasons.append(f"URR {plain(round(urr.min_urr_percent, 1))} % is below the "
                           f"claimed {plain(urr_claim)} %")
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
    e = checks.Errors()
    day = checks.date(e, "performed_on", performed_on, not_after=shop_today())
    note = checks.text(e, "notes", notes)
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
    checks.derived_row(row)
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

