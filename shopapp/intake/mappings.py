"""Per-machine column mappings: how one machine's export file maps onto our run fields.

A use-case (docs/architecture.md, "Inside a feature package"): quality (or admin) saves
a machine's mapping once — delimiter, decimal mark, header rows to skip, encoding, the
machine's angle convention and units, and which export column holds which of our
fields — after checking it on a sample export (:func:`preview`). Imports of that machine
read every file through it (:func:`layout_of`).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.core import audit
from shopapp.core.checks import Errors, choice, integer, number
from shopapp.core.permissions import require
from shopapp.intake.files import FIELDS, REQUIRED_FIELDS, Layout, ParsedFile, parse_csv
from shopapp.models import ANGLE_SENSES, READING_UNITS, Machine, MachineMapping, User
from shopapp.models.intake import DECIMAL_MARKS, DELIMITERS, ENCODINGS, SPEED_UNITS

MAX_HEADER_CHARS = 100


def mapping_of(session: Session, machine: Machine) -> MachineMapping | None:
    """The machine's saved mapping, if any."""
    return session.scalars(
        select(MachineMapping).where(MachineMapping.machine_id == machine.id)).first()


def layout_of(mapping: MachineMapping) -> Layout:
    """The mapping as the parser's :class:`Layout`."""
    return Layout(
        delimiter=mapping.delimiter, decimal_mark=mapping.decimal_mark,
        skip_rows=mapping.skip_rows, encoding=mapping.encoding,
        angle_sense=mapping.angle_sense, angle_zero_deg=mapping.angle_zero_deg,
        speed_unit=mapping.speed_unit, reading_unit=mapping.reading_unit,
        columns=dict(mapping.columns), name=f"export of {mapping.machine.name}",
    )


def check_mapping(values: Mapping[str, Any]) -> dict[str, Any]:
    """Check a mapping's fields; the clean values, or ValidationFailed naming each field.

    ``values``: ``delimiter``, ``decimal_mark``, ``skip_rows``, ``encoding``,
    ``angle_sense``, ``angle_zero_deg`` (0–360), ``speed_unit``, ``reading_unit`` (or
    empty when the export has a unit column), and ``columns`` (our field → header text).
    """
    e = Errors()
    clean: dict[str, Any] = {
        "delimiter": choice(e, "delimiter", values.get("delimiter"), DELIMITERS),
        "decimal_mark": choice(e, "decimal_mark", values.get("decimal_mark"), DECIMAL_MARKS),
        "skip_rows": integer(e, "skip_rows", values.get("skip_rows"), minimum=0, maximum=50),
        "encoding": choice(e, "encoding", values.get("encoding"), ENCODINGS),
        "angle_sense": choice(e, "angle_sense", values.get("angle_sense"), ANGLE_SENSES),
        "angle_zero_deg": number(e, "angle_zero_deg", values.get("angle_zero_deg"),
                                 minimum=0.0, maximum=360.0, unit="°"),
        "speed_unit": choice(e, "speed_unit", values.get("speed_unit"), SPEED_UNITS),
    }
    if clean["angle_zero_deg"] is not None and clean["angle_zero_deg"] >= 360.0:
        clean["angle_zero_deg"] = 0.0  # 360° is the same zero as 0°
    unit = values.get("reading_unit") or None
    if unit is not None and unit not in READING_UNITS:
        e.add("reading_unit", f"{str(unit)[:12]!r} is not a reading unit; use one of "
              + ", ".join(READING_UNITS))
    clean["reading_unit"] = unit
    columns: dict[str, str] = {}
    raw_columns = values.get("columns") or {}
    for ours, theirs in raw_columns.items():
        if ours not in FIELDS:
            e.add(f"column_{ours}"[:40], "is not one of our fields")
            continue
        text = str(theirs or "").strip()
        if len(text) > MAX_HEADER_CHARS:
            e.add(f"column_{ours}", f"at most {MAX_HEADER_CHARS} characters")
        elif text:
            columns[ours] = text
    for ours in REQUIRED_FIELDS:
        if ours not in columns:
            e.add(f"column_{ours}", "required: which column of the export holds it?")
    if "job" not in columns and "serial" not in columns:
        e.add("column_job", "map the job number or the rotor's serial number column")
    if "unit" not in columns and unit is None:
        e.add("reading_unit", "the export has no unit column: choose the unit of its amplitudes")
    seen: dict[str, str] = {}
    for ours, theirs in columns.items():
        if theirs in seen:
            e.add(f"column_{ours}", f"{theirs!r} is already mapped to {seen[theirs]}")
        seen[theirs] = ours
    e.raise_if_any()
    clean["columns"] = columns
    return clean


def preview(sample: bytes, values: Mapping[str, Any]) -> ParsedFile:
    """A sample export read with the mapping ``values`` (not saved): its rows as parsed."""
    clean = check_mapping(values)
    return parse_csv(sample, Layout(**clean, name="sample export"))


def save_mapping(session: Session, machine: Machine, values: Mapping[str, Any], *,
                 by: User) -> MachineMapping:
    """Save (create or replace) the machine's mapping; audited with before and after."""
    require(by, "edit_machines")
    clean = check_mapping(values)
    mapping = mapping_of(session, machine)
    fields = list(clean)
    before = audit.snapshot(mapping, fields) if mapping is not None else None
    if mapping is None:
        mapping = MachineMapping(machine=machine, **clean)
        session.add(mapping)
    else:
        for name, value in clean.items():
            setattr(mapping, name, value)
    mapping.updated_by_id = by.id
    session.flush()
    audit.record(session, by=by, entity="machine_mapping", entity_id=mapping.id,
                 action="save_mapping", before=before, after=audit.snapshot(mapping, fields))
    return mapping


def machine_choices(session: Session) -> list[tuple[str, str]]:
    """The machines in service as (id, name) choices, with "none" first."""
    rows = session.execute(select(Machine.id, Machine.name).where(Machine.archived.is_(False))
                           .order_by(Machine.name)).all()
    return [("", "— (an exchange file names its jobs)")] + [(str(i), n) for i, n in rows]


def machine_or_none(session: Session, machine_id: str | int | None) -> Machine | None:
    """The machine with this id (from a form), or None for none given or unknown."""
    text = str(machine_id if machine_id is not None else "").strip()
    if not (text.isascii() and text.isdigit() and len(text) <= 9):
        return None
    return session.get(Machine, int(text))
