"""Import use-cases: plan a file row by row, and apply it in one transaction.

Both go through the same code: every row is handed to the registry's use-cases
(:mod:`shopapp.registry.customers`, ``rotor_types``, ``rotors``) or to the jobs'
(:func:`shopapp.jobs.past_jobs.record_past_job`), each inside a savepoint of its own,
so a row is judged by exactly the rules of the pages, and a later row sees what an
earlier row of the same file created. :func:`preview` then rolls everything back
(nothing written, whatever happened); :func:`apply` keeps it only when no row was
refused, records an :class:`~shopapp.models.ImportBatch`, and leaves the one commit to
the caller. A refused row refuses the whole file (:class:`ImportRefused`): a half-read
history is worse than none.

Matching (README, "Moving over from spreadsheets"): a customer by name, a rotor type by
customer and part number, a rotor by customer and serial (names and keys ignoring case),
a past job by its number when given (else by rotor and both dates). An update changes
only the columns present in the file, and of those only the cells that are not empty;
a row whose cells equal what is stored is ``unchanged`` and writes nothing.
"""

from __future__ import annotations

import datetime as dt
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.units import convert_unbalance
from shopapp.core import audit
from shopapp.core.errors import ServiceError, ValidationFailed
from shopapp.core.permissions import require
from shopapp.imports.files import Sheet, SourceRow
from shopapp.imports.kinds import Kind, kind_of
from shopapp.jobs import past_jobs
from shopapp.jobs.intake import ToleranceSpec
from shopapp.models import Customer, ImportBatch, Machine, RotorType, User
from shopapp.registry import customers, rotor_types, rotors

ACTIONS = ("create", "update", "unchanged", "refused")
# A cell a spreadsheet program would run as a formula when the text is opened there.
_FORMULA_START = ("=", "+", "-", "@")
_DECIMAL_COMMA = re.compile(r"^\s*[-+]?\d+,\d+\s*$")
_TRUE = ("yes", "y", "true", "1", "x")
_FALSE = ("no", "n", "false", "0", "")
# Fields of the use-cases' messages → the file's column.
_FIELD_COLUMN = {"rotor_type_id": "part_number", "customer_id": "customer",
                 "machine_id": "machine", "tolerance_method": "tolerance_grade",
                 "explicit_limit_1_gmm": "tolerance_gmm_1",
                 "explicit_limit_2_gmm": "tolerance_gmm_2"}


@dataclass(frozen=True)
class RowResult:
    """What happens (or would happen) to one row: ``action`` of :data:`ACTIONS`."""

    line: int
    key: str
    action: str
    column: str = ""  # the column a refusal names ("" for the row as a whole)
    reason: str = ""  # why refused, or which columns an update changes
    note: str = ""  # kept as is but worth knowing (text that looks like a formula)

    @property
    def message(self) -> str:
        """One line: ``line 4 (key): refused — column: reason``."""
        text = f"line {self.line} ({self.key}): {self.action}"
        if self.reason:
            where = f"{self.column}: " if self.column else ""
            text += f" — {where}{self.reason}"
        if self.note:
            text += f" [{self.note}]"
        return text


@dataclass
class ImportReport:
    """Every row's result and the counts; ``batch_id`` once applied."""

    kind: str
    file_name: str
    sha256: str
    rows: list[RowResult] = field(default_factory=list)
    applied: bool = False
    batch_id: int | None = None

    def count(self, action: str) -> int:
        return sum(1 for r in self.rows if r.action == action)

    @property
    def refused(self) -> list[RowResult]:
        return [r for r in self.rows if r.action == "refused"]

    def summary(self) -> str:
        """``12 rows: 10 create, 1 update, 1 unchanged, 0 refused`` (``1 row: …``)."""
        counts = ", ".join(f"{self.count(a)} {a}" for a in ACTIONS)
        n = len(self.rows)
        return f"{n} row{'' if n == 1 else 's'}: {counts}"


class ImportRefused(ServiceError):
    """The file was not applied: some rows were refused (``report`` says which and why)."""

    status = 422

    def __init__(self, report: ImportReport) -> None:
        n = len(report.refused)
        first = report.refused[0].message if report.refused else ""
        rows = len(report.rows)
        super().__init__(f"nothing imported: {n} of {rows} row{'' if rows == 1 else 's'} refused "
                         f"(first: {first})")
        self.report = report


class _RowRefused(Exception):
    """One row refused by the import's own reading (not by a use-case)."""

    def __init__(self, column: str, reason: str) -> None:
        super().__init__(f"{column}: {reason}")
        self.column = column
        self.reason = reason


Progress = Callable[[int], None]


# --------------------------------------------------------------------------- entry points


def preview(session: Session, *, by: User, kind: str, sheet: Sheet,
            progress: Progress | None = None) -> ImportReport:
    """What applying ``sheet`` would do, row by row; nothing is written (rolled back)."""
    spec = _start(by, kind, sheet)
    outer = session.begin_nested()
    try:
        return _run(session, by, spec, sheet, None, progress)
    finally:
        outer.rollback()


def apply(session: Session, *, by: User, kind: str, sheet: Sheet,
          progress: Progress | None = None) -> ImportReport:
    """Apply ``sheet``: every row or none. The caller commits once.

    Raises
    ------
    PermissionDenied
        ``by`` may not import this kind.
    ValidationFailed
        Field ``file``: a missing or unknown column.
    ImportRefused
        Some row was refused; nothing is left in the session (its ``report`` has every row).
    """
    spec = _start(by, kind, sheet)
    outer = session.begin_nested()
    try:
        batch = ImportBatch(kind=spec.name, file_name=sheet.file_name[:255],
                            file_sha256=sheet.sha256, by_id=by.id, rows=0, created=0,
                            updated=0, unchanged=0)
        session.add(batch)
        session.flush()
        report = _run(session, by, spec, sheet, batch, progress)
        if report.refused:
            raise ImportRefused(report)
        batch.rows = len(report.rows)
        batch.created = report.count("create")
        batch.updated = report.count("update")
        batch.unchanged = report.count("unchanged")
        session.flush()
        audit.record(session, by=by, entity="import_batch", entity_id=batch.id, action="apply",
                     after=audit.snapshot(batch))
        session.flush()
    except BaseException:
        outer.rollback()
        raise
    outer.commit()
    report.applied = True
    report.batch_id = batch.id
    return report


def _start(by: User, kind: str, sheet: Sheet) -> Kind:
    try:
        spec = kind_of(kind)
    except KeyError:
        raise ValidationFailed("kind", f"{kind[:30]!r} is not an import kind") from None
    require(by, spec.permission)
    unknown = [c for c in sheet.columns if c not in spec.columns]
    if unknown:
        raise ValidationFailed(
            "file", f"unknown column {unknown[0]!r} (a unit we do not know, or a typing error); "
            f"the {spec.label} columns are: {', '.join(spec.columns)}")
    missing = [c for c in spec.required if c not in sheet.columns]
    if missing:
        raise ValidationFailed("file", f"the column {missing[0]!r} is missing; the "
                               f"{spec.label} file needs {', '.join(spec.required)}")
    return spec


def _run(session: Session, by: User, spec: Kind, sheet: Sheet, batch: ImportBatch | None,
         progress: Progress | None) -> ImportReport:
    report = ImportReport(kind=spec.name, file_name=sheet.file_name, sha256=sheet.sha256)
    seen: dict[tuple[str, ...], int] = {}
    handler = _HANDLERS[spec.name]
    for row in sheet.rows:
        values = _clean_cells(spec, sheet, row)
        key_columns = spec.key
        if spec.alt_key and not any((values.get(c) or "").strip() for c in key_columns):
            key_columns = spec.alt_key
        typed = tuple((values.get(c) or "").strip() for c in key_columns)
        key_cells = tuple(v.lower() for v in typed)  # duplicates differ in case only
        key = " / ".join(v for v in typed if v)[:120] or "(no key)"  # shown as typed
        note = _formula_note(spec, values)
        if row.problem is not None:
            report.rows.append(RowResult(row.line, key, "refused", "", row.problem))
        elif any(key_cells) and key_cells in seen:
            report.rows.append(RowResult(
                row.line, key, "refused", key_columns[-1],
                f"duplicate of line {seen[key_cells]} (same {', '.join(key_columns)})"))
        else:
            if any(key_cells):
                seen[key_cells] = row.line
            report.rows.append(_one_row(session, by, handler, values, batch, row.line, key,
                                        note))
        if progress is not None:
            progress(1)
    return report


def _one_row(session: Session, by: User, handler: Any, values: dict[str, str | None],
             batch: ImportBatch | None, line: int, key: str, note: str) -> RowResult:
    """One row in a savepoint of its own: a refusal leaves nothing of it behind."""
    try:
        with session.begin_nested():
            action, reason = handler(session, by, values, batch, line)
    except _RowRefused as exc:
        return RowResult(line, key, "refused", exc.column, exc.reason, note)
    except ValidationFailed as exc:
        column = _FIELD_COLUMN.get(exc.field, exc.field)
        return RowResult(line, key, "refused", column, exc.errors.get(exc.field, exc.message),
                         note)
    except BalancingInputError as exc:
        return RowResult(line, key, "refused", _FIELD_COLUMN.get(exc.field, exc.field),
                         exc.message, note)
    return RowResult(line, key, action, "", reason, note)


# --------------------------------------------------------------------------- cells


def _clean_cells(spec: Kind, sheet: Sheet, row: SourceRow) -> dict[str, str | None]:
    """The row's cells, a decimal comma read as a point in numeric columns of a
    semicolon file (spreadsheets set to a decimal comma write both)."""
    out = dict(row.values)
    if sheet.delimiter == ";":
        for name in spec.numeric:
            v = out.get(name)
            if v is not None and _DECIMAL_COMMA.match(v):
                out[name] = v.replace(",", ".")
    return out


def _formula_note(spec: Kind, values: Mapping[str, str | None]) -> str:
    """A note when a text cell starts like a spreadsheet formula: it is stored as text and
    never run (the dashboard's CSV export puts an apostrophe before such a cell)."""
    for name, v in values.items():
        if v and name not in spec.numeric and v.lstrip().startswith(_FORMULA_START):
            return f"{name} starts with {v.lstrip()[0]!r}: kept as text, never run"
    return ""


def _given(values: Mapping[str, str | None], names: tuple[str, ...]) -> dict[str, str]:
    """The non-empty cells among ``names`` (an empty cell leaves the stored value)."""
    return {n: v.strip() for n in names if (v := values.get(n)) is not None and v.strip()}


def _same(stored: Any, given: str) -> bool:
    """Whether a cell says what is stored (numbers compared as numbers)."""
    if stored is None:
        return False
    if isinstance(stored, bool):
        low = given.lower()
        return (low in _TRUE) if stored else (low in _FALSE)
    if isinstance(stored, int | float):
        try:
            return float(given) == float(stored)
        except ValueError:
            return False
    return str(stored).strip() == given


def _changed(obj: Any, given: Mapping[str, str]) -> dict[str, str]:
    return {k: v for k, v in given.items() if not _same(getattr(obj, k), v)}


def _yes_no(column: str, value: str) -> bool:
    low = value.strip().lower()
    if low in _TRUE:
        return True
    if low in _FALSE:
        return False
    raise _RowRefused(column, f"{value[:30]!r} is not yes or no")


def _customer(session: Session, values: Mapping[str, str | None]) -> Customer:
    name = (values.get("customer") or "").strip()
    if not name:
        raise _RowRefused("customer", "is required")
    found = session.scalars(select(Customer).where(func.lower(Customer.name) == name.lower())
                            .limit(1)).first()
    if found is None:
        raise _RowRefused("customer", f"no customer called {name[:60]!r}; import the "
                          "customers first (or check the spelling)")
    return found


# --------------------------------------------------------------------------- kinds


def _customers(session: Session, by: User, values: Mapping[str, str | None],
               _batch: ImportBatch | None, _line: int) -> tuple[str, str]:
    given: dict[str, Any] = _given(values, customers.CUSTOMER_FIELDS)
    name = given.get("name", "")
    if not name:
        raise _RowRefused("name", "is required")
    existing = session.scalars(
        select(Customer).where(func.lower(Customer.name) == name.lower()).limit(1)).first()
    if existing is None:
        if "requires_residual_test" in given:
            given["requires_residual_test"] = _yes_no("requires_residual_test",
                                                      given["requires_residual_test"])
        customers.create_customer(session, by=by, **given)
        return "create", ""
    given.pop("name")  # the key: a different spelling of case is the same customer
    changed: dict[str, Any] = _changed(existing, given)
    if not changed:
        return "unchanged", ""
    if "requires_residual_test" in changed:
        changed["requires_residual_test"] = _yes_no("requires_residual_test",
                                                    changed["requires_residual_test"])
    customers.update_customer(session, existing, by=by, **changed)
    return "update", "changes " + ", ".join(changed)


_RT_FIELDS = tuple(f for f in rotor_types.ROTOR_TYPE_FIELDS if f != "part_number")


def _rotor_types(session: Session, by: User, values: Mapping[str, str | None],
                 _batch: ImportBatch | None, _line: int) -> tuple[str, str]:
    customer = _customer(session, values)
    given: dict[str, Any] = _given(values, (*_RT_FIELDS, "part_number"))
    part = given.get("part_number", "")
    existing = None
    if part:
        existing = session.scalars(select(RotorType).where(
            RotorType.customer_id == customer.id,
            func.lower(RotorType.part_number) == part.lower()).limit(1)).first()
    if existing is None:
        rotor_types.create_rotor_type(session, by=by, customer=customer, **given)
        return "create", ""
    given.pop("part_number")
    changed = _changed(existing, given)
    if not changed:
        return "unchanged", ""
    rotor_types.update_rotor_type(session, existing, by=by, **changed)
    return "update", "changes " + ", ".join(changed)


def _rotors(session: Session, by: User, values: Mapping[str, str | None],
            _batch: ImportBatch | None, _line: int) -> tuple[str, str]:
    customer = _customer(session, values)
    given = _given(values, ("serial_number", "part_number", "notes"))
    rotor_type = None
    if "part_number" in given:
        rotor_type = session.scalars(select(RotorType).where(
            RotorType.customer_id == customer.id,
            func.lower(RotorType.part_number) == given["part_number"].lower()).limit(1)).first()
        if rotor_type is None:
            raise _RowRefused("part_number", f"{customer.name} has no rotor type "
                              f"{given['part_number'][:60]!r}; import the rotor types first")
    existing = rotors.find_rotor(session, customer.id, given.get("serial_number", ""))
    if existing is None:
        if rotor_type is None:
            raise _RowRefused("part_number", "is required for a new rotor (its rotor type)")
        rotors.create_rotor(session, by=by, customer=customer, rotor_type=rotor_type,
                            serial_number=given.get("serial_number", ""),
                            notes=given.get("notes", ""))
        return "create", ""
    changed: dict[str, Any] = {}
    if rotor_type is not None and rotor_type.id != existing.rotor_type_id:
        changed["rotor_type"] = rotor_type
    if "notes" in given and not _same(existing.notes, given["notes"]):
        changed["notes"] = given["notes"]
    if not changed:
        return "unchanged", ""
    rotors.update_rotor(session, existing, by=by, **changed)
    return "update", "changes " + ", ".join("part_number" if k == "rotor_type" else k
                                            for k in changed)


def _day(values: Mapping[str, str | None], column: str) -> dt.date | None:
    raw = (values.get(column) or "").strip()
    if not raw:
        return None
    try:
        return dt.date.fromisoformat(raw)
    except ValueError:
        raise _RowRefused(column, f"{raw[:30]!r} is not a date; write it as YYYY-MM-DD "
                          "(a day/month order cannot be guessed)") from None


def _float(values: Mapping[str, str | None], column: str) -> float | None:
    raw = (values.get(column) or "").strip()
    if not raw:
        return None
    try:
        return float(raw)
    except ValueError:
        raise _RowRefused(column, f"must be a number, got {raw[:40]!r}") from None


def _tolerance(values: Mapping[str, str | None]) -> ToleranceSpec | None:
    grade = _float(values, "tolerance_grade")
    limit_1 = _float(values, "tolerance_gmm_1")
    limit_2 = _float(values, "tolerance_gmm_2")
    if grade is not None and (limit_1 is not None or limit_2 is not None):
        raise _RowRefused("tolerance_gmm_1", "give a balance grade or limits in g·mm, not both")
    if grade is not None:
        return ToleranceSpec("grade", grade=grade)
    if limit_1 is not None:
        return ToleranceSpec("explicit", plane_1_gmm=limit_1, plane_2_gmm=limit_2)
    if limit_2 is not None:
        raise _RowRefused("tolerance_gmm_1", "is required when tolerance_gmm_2 is given")
    return None  # the rotor type's own tolerance


def _verdict(values: Mapping[str, str | None]) -> bool | None:
    raw = (values.get("verdict") or "").strip().lower()
    if not raw:
        return None
    if raw in ("pass", "fail"):
        return raw == "pass"
    raise _RowRefused("verdict", f"{raw[:30]!r} is not allowed; write pass or fail")


def _jobs(session: Session, by: User, values: Mapping[str, str | None],
          batch: ImportBatch | None, line: int) -> tuple[str, str]:
    customer = _customer(session, values)
    serial = (values.get("serial_number") or "").strip()
    rotor = rotors.find_rotor(session, customer.id, serial)
    if rotor is None:
        raise _RowRefused("serial_number", f"{customer.name} has no rotor {serial[:60]!r}; "
                          "import the rotors first")
    received, dispatched = _day(values, "received_on"), _day(values, "dispatched_on")
    number = (values.get("number") or "").strip()
    if number:
        same = past_jobs.find_job_number(session, number)
        if same is not None and same.imported and same.rotor_id == rotor.id:
            return "unchanged", "already imported"
    elif received is not None and dispatched is not None and (
            past_jobs.find_same_past_job(session, rotor, received, dispatched) is not None):
        return "unchanged", "already imported (same rotor and dates)"
    unit = (values.get("residual_unit") or "").strip()
    residuals: list[float | None] = []
    for k in (1, 2):
        value = _float(values, f"residual_{k}")
        if value is not None:
            try:
                value = convert_unbalance(value, unit, "g·mm")
            except BalancingInputError as exc:
                column = "residual_unit" if exc.field == "from_unit" else f"residual_{k}"
                raise _RowRefused(column, exc.message if unit else "is required (g·mm, "
                                  "g·cm, kg·m, g·in or oz·in)") from None
        residuals.append(value)
    machine = None
    machine_name = (values.get("machine") or "").strip()
    if machine_name:
        machine = session.scalars(select(Machine).where(
            func.lower(Machine.name) == machine_name.lower()).limit(1)).first()
        if machine is None:
            raise _RowRefused("machine", f"no machine called {machine_name[:60]!r}")
    past_jobs.record_past_job(
        session, by=by, rotor=rotor, received_on=received, dispatched_on=dispatched,
        residual_gmm=residuals, passed=_verdict(values),
        residual_angle_deg=[values.get("residual_1_angle_deg"),
                            values.get("residual_2_angle_deg")],
        job_number=number, machine=machine, tolerance=_tolerance(values),
        balancing_speed_rpm=_float(values, "balancing_speed_rpm"),
        customer_order_ref=values.get("customer_order_ref") or "",
        notes=values.get("notes") or "", batch=batch, source_row=line)
    return "create", ""


_HANDLERS: dict[str, Callable[..., tuple[str, str]]] = {
    "customers": _customers, "rotor-types": _rotor_types, "rotors": _rotors, "jobs": _jobs,
}

