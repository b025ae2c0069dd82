"""Shop arbors and their error history, found by index balancing.

An arbor's error (seat eccentricity, run-out) is measured by two index runs: a
run, the rotor turned on the arbor by ``index_deg``, a second run; see
:func:`shopapp.balancing.arbor.separate_arbor_error` for the arithmetic. The
stored error can then be subtracted from a job's readings on that arbor.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping, Sequence
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session, selectinload

from shopapp.balancing import arbor as arbor_core
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.phasors import amplitude_angle, phasor
from shopapp.core import audit, checks
from shopapp.core.clock import shop_today
from shopapp.core.display import counted, percent, plain
from shopapp.core.errors import ValidationFailed
from shopapp.core.permissions import require
from shopapp.models import Arbor, ArborErrorMeasurement, Job, User
from shopapp.traceability.common import add_named, core_error, flush_named

# Judgement: a stored arbor error holds for rotors within ±20 % of the mass it was
# measured with (its seat-eccentricity part scales with the rotor's mass).
ARBOR_MASS_TOLERANCE = 0.20

ARBOR_FIELDS = ("name", "description", "mass_kg", "notes", "archived")


def _clean_arbor(values: Mapping[str, Any], *, partial: bool = False) -> dict[str, Any]:
    unknown = sorted(set(values) - set(ARBOR_FIELDS))
    if unknown:
        raise ValidationFailed(unknown[0], "is not an arbor field")
    e = checks.Errors()
    out: dict[str, Any] = {}
    if not partial or "name" in values:
        out["name"] = checks.text(e, "name", values.get("name"), max_len=100, required=True)
    if not partial or "description" in values:
        out["description"] = checks.text(e, "description", values.get("description", ""),
                                         max_len=200)
    if not partial or "mass_kg" in values:
        out["mass_kg"] = checks.number(e, "mass_kg", values.get("mass_kg"), required=False, above=0)
    if not partial or "notes" in values:
        out["notes"] = checks.text(e, "notes", values.get("notes", ""))
    if "archived" in values:
        out["archived"] = bool(values["archived"])
    e.raise_if_any()
    return out


def create_arbor(session: Session, *, by: User, **fields: Any) -> Arbor:
    """Add a shop arbor (name, description, mass_kg, notes); ``edit_machines``."""
    require(by, "edit_machines")
    values = _clean_arbor(fields)
    arbor = Arbor(**values)
    add_named(session, arbor, by=by, entity="arbor", noun="arbor",
              taken=f"an arbor called {values['name']!r} exists")
    return arbor


def update_arbor(session: Session, arbor: Arbor, *, by: User, **fields: Any) -> Arbor:
    """Change an arbor's fields (any of name, description, mass_kg, notes, archived)."""
    require(by, "edit_machines")
    values = _clean_arbor(fields, partial=True)
    before = audit.snapshot(arbor)
    for k, v in values.items():
        setattr(arbor, k, v)
    flush_named(session, "arbor")
    audit.record(session, by=by, entity="arbor", entity_id=arbor.id, action="update",
                 before=before, after=audit.snapshot(arbor))
    return arbor


def arbors(session: Session, *, include_archived: bool = False) -> list[Arbor]:
    """Arbors by name, each with its measurements loaded (two queries)."""
    q = select(Arbor).options(selectinload(Arbor.measurements)).order_by(Arbor.name)
    if not include_archived:
        q = q.where(Arbor.archived.is_(False))
    return list(session.scalars(q))


def run_phasors(e: checks.Errors, field: str, run: Sequence[Any], planes: int
                ) -> list[complex]:
    """``[(amplitude, angle_deg), ...]`` per plane → phasors; errors into ``e``
    (``<field>.plane_<p>.amplitude`` / ``.angle_deg``)."""
    out: list[complex] = []
    if len(run) != planes:
        e.add(field, f"give a reading for every plane (the rotor has {counted(planes, 'plane')})")
        return out
    for p, pair in enumerate(run, start=1):
        try:
            amp, ang = pair
        except (TypeError, ValueError):
            e.add(f"{field}.plane_{p}", "give an amplitude and an angle")
            continue
        a = checks.number(e, f"{field}.plane_{p}.amplitude", amp, minimum=0)
        g = checks.number(e, f"{field}.plane_{p}.angle_deg", ang)
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
    e = checks.Errors()
    v1 = run_phasors(e, "first_run", first_run, planes)
    v2 = run_phasors(e, "second_run", second_run, planes)
    alpha = checks.number(e, "index_deg", index_deg)
    if second_frame not in arbor_core.FRAMES:
        e.add("second_frame", f"must be one of {', '.join(arbor_core.FRAMES)}")
    e.raise_if_any()
    try:
        return arbor_core.separate_arbor_error(v1, v2, index_deg=alpha or 0.0,
                                               second_frame=second_frame)
    except BalancingInputError as exc:
        raise core_error(exc) from None


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
    e = checks.Errors()
    day = checks.date(e, "measured_on", measured_on, not_after=shop_today())
    note = checks.text(e, "notes", notes)
    if arbor.archived:
        e.add("arbor_id", f"arbor {arbor.name} is archived")
    if job is not None and job.arbor_id not in (None, arbor.id):
        e.add("arbor_id", f"job {job.number} is on another arbor")
    if rotor_mass_kg in (None, "") and job is not None:
        rotor_mass_kg = job.rotor.rotor_type.mass_kg
    mass = checks.number(e, "rotor_mass_kg", rotor_mass_kg, required=False, above=0)
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
    checks.derived_row(row)
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
        return (f"The arbor error was measured with a {plain(m.rotor_mass_kg)} kg rotor; this "
                f"rotor is {plain(rotor_mass_kg)} kg (more than {percent(ARBOR_MASS_TOLERANCE)} "
                "apart): "
                "measure the arbor again with this rotor (index runs).")
    return ""

