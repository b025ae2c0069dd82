"""The shop's balancing machines: add, edit, retire. Needs ``edit_machines`` (quality, admin).

Their verification register (proving tests) belongs to :mod:`shopapp.traceability`.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from shopapp.core import checks
from shopapp.core.display import counted, plain
from shopapp.core.permissions import require
from shopapp.models import BEARING_KINDS, READING_UNITS, Job, Machine, User
from shopapp.registry.common import (
    MAX_MASS_KG,
    MAX_NOTES,
    MAX_SPEED_RPM,
    flush_unique,
    record,
    refuse_if_changed,
    refuse_unknown,
    set_archived,
    update_fields,
)

MAX_INTERVAL_DAYS = 3650
MAX_EMAR_GMM_PER_KG = 10_000.0
DEFAULT_INTERVAL_DAYS = 365

MACHINE_FIELDS: tuple[str, ...] = (
    "name",
    "bearing_kind",
    "min_mass_kg",
    "max_mass_kg",
    "min_speed_rpm",
    "max_speed_rpm",
    "claimed_emar_gmm_per_kg",
    "claimed_urr_pct",
    "suspension_resonance_rpm",
    "reading_unit",
    "reading_planes",
    "verification_interval_days",
    "notes",
)


def _blank(value: Any) -> bool:
    return value is None or (isinstance(value, str) and not value.strip())


def _clean_machine(
    session: Session, values: Mapping[str, Any], exclude_id: int | None
) -> dict[str, Any]:
    e = checks.Errors()
    v = values.get
    out: dict[str, Any] = {
        "name": checks.text(e, "name", v("name"), max_len=100, required=True),
        "bearing_kind": checks.choice(e, "bearing_kind", v("bearing_kind"), BEARING_KINDS),
        # Required, never guessed: a vibration reading judged as g·mm gives nonsense verdicts.
        "reading_unit": checks.choice(e, "reading_unit", v("reading_unit"), READING_UNITS),
        "reading_planes": checks.integer(e, "reading_planes", v("reading_planes"), minimum=1,
                                         maximum=2),
        "notes": checks.text(e, "notes", v("notes"), max_len=MAX_NOTES),
    }
    for low, high, maximum, unit in (
        ("min_mass_kg", "max_mass_kg", MAX_MASS_KG, "kg"),
        ("min_speed_rpm", "max_speed_rpm", MAX_SPEED_RPM, "rpm"),
    ):
        # The low end may be left empty (0); the high end is required and above 0.
        out[low] = checks.number(e, low, 0.0 if _blank(v(low)) else v(low), minimum=0.0,
                                 maximum=maximum, unit=unit)
        out[high] = checks.number(e, high, v(high), above=0.0, maximum=maximum, unit=unit)
    for low, high, unit in (
        ("min_mass_kg", "max_mass_kg", "kg"),
        ("min_speed_rpm", "max_speed_rpm", "rpm"),
    ):
        if out[low] is not None and out[high] is not None and out[low] >= out[high]:
            e.add(low, f"must be below the maximum ({plain(out[high])} {unit}), "
                       f"got {plain(out[low])}")
    out["claimed_emar_gmm_per_kg"] = checks.number(
        e, "claimed_emar_gmm_per_kg", v("claimed_emar_gmm_per_kg"), required=False, above=0,
        maximum=MAX_EMAR_GMM_PER_KG, unit="g·mm/kg",
    )
    out["claimed_urr_pct"] = checks.number(
        e, "claimed_urr_pct", v("claimed_urr_pct"), required=False, above=0, maximum=100,
        unit="%",
    )
    out["suspension_resonance_rpm"] = checks.number(
        e, "suspension_resonance_rpm", v("suspension_resonance_rpm"), required=False, above=0,
        maximum=MAX_SPEED_RPM, unit="rpm",
    )
    interval = v("verification_interval_days")
    out["verification_interval_days"] = checks.integer(
        e, "verification_interval_days", DEFAULT_INTERVAL_DAYS if _blank(interval) else interval,
        minimum=1, maximum=MAX_INTERVAL_DAYS,
    )
    if "name" not in e:
        stmt = select(Machine.name).where(func.lower(Machine.name) == out["name"].lower())
        if exclude_id is not None:
            stmt = stmt.where(Machine.id != exclude_id)
        other = session.scalar(stmt.limit(1))
        if other is not None:
            e.add("name", f"A machine called {other!r} already exists; machine names are unique.")
    e.raise_if_any()
    return out


def _taken(name: str) -> str:
    return f"A machine called {name!r} already exists."


def create_machine(session: Session, *, by: User, **values: Any) -> Machine:
    """Add a balancing machine (:data:`MACHINE_FIELDS`). Needs ``edit_machines`` (quality, admin).

    ``reading_unit`` (what its readings are: calibrated "g·mm" or a vibration unit)
    and ``reading_planes`` (1 or 2 sensors read in one run) are required.
    Mass and speed ranges: minimum ≥ 0 and below the maximum; the claimed
    minimum achievable residual specific unbalance (g·mm/kg) > 0; the claimed
    unbalance reduction ratio in (0, 100] %; verification interval 1–3650 days.
    """
    require(by, "edit_machines")
    refuse_unknown(values, MACHINE_FIELDS)
    clean = _clean_machine(session, values, None)
    machine = Machine(**clean)
    flush_unique(session, machine, "name", _taken(clean["name"]))
    record(session, by, machine, "machine", "create", None)
    return machine


def update_machine(session: Session, machine: Machine, *, by: User, drawn: str | None = None,
                   **fields: Any) -> Machine:
    """Change some of a machine's fields; same rules as :func:`create_machine`.
    ``drawn``: the edit form's stamp (:func:`~shopapp.registry.common.refuse_if_changed`)."""
    require(by, "edit_machines")
    refuse_unknown(fields, MACHINE_FIELDS)
    refuse_if_changed(machine, MACHINE_FIELDS, drawn, entity="machine")
    merged = {name: getattr(machine, name) for name in MACHINE_FIELDS} | fields
    clean = _clean_machine(session, merged, machine.id)
    update_fields(session, machine, clean, by=by, entity="machine", field="name",
                  taken=_taken(clean["name"]))
    return machine


def archive_machine(session: Session, machine: Machine, *, by: User) -> Machine:
    """Retire a machine from new work; refused while a job on it is still open."""
    set_archived(
        session, machine, by=by, action="edit_machines", entity="machine", archived=True,
        open_job_column=Job.machine_id,
        refusal=lambda n: f"{machine.name} has {counted(n, 'open job')}; move or finish them first",
    )
    return machine


def unarchive_machine(session: Session, machine: Machine, *, by: User) -> Machine:
    set_archived(session, machine, by=by, action="edit_machines", entity="machine",
                 archived=False)
    return machine
