"""The importers fuzzed (hypothesis): any bytes, any cells — a row result or a message
naming the file, never another exception, never a half-written or non-finite row.

Reference: the rules of the issue ("bad input → a clear message, nothing written"),
common practice, no source.
"""

from __future__ import annotations

import csv
import io
import math

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from shopapp.core.errors import ValidationFailed
from shopapp.imports import files, service
from shopapp.models import (
    AuditEvent,
    Customer,
    ImportBatch,
    ImportedJob,
    Job,
    RotorType,
    User,
)

FIXTURE_OK = settings(max_examples=40, deadline=None,
                      suppress_health_check=[HealthCheck.function_scoped_fixture,
                                             HealthCheck.too_slow])

# Cells a spreadsheet may hold: numbers in many spellings, formulas, control characters,
# very long text, other scripts.
_CELL = st.one_of(
    st.sampled_from(["", " ", "0", "-0", "1e400", "nan", "inf", "-inf", "1,5", "6.3", "=1+1",
                     "+SUM(A1)", "@cmd", "-2", "2019-02-30", "2020-01-06", "pass", "fail",
                     "g·mm", "oz·in", "lb·ft", "\x00", "\x07bell", "é", "\"", "Brackwater "
                     "Pumps (invented)", "BW-1001", "a" * 6000]),
    st.text(max_size=30),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(min_value=-10**30, max_value=10**30).map(str),
)


def _csv(columns: list[str], rows: list[list[str]], delimiter: str) -> bytes:
    out = io.StringIO()
    writer = csv.writer(out, delimiter=delimiter)
    writer.writerow(columns)
    writer.writerows(rows)
    return out.getvalue().encode("utf-8", errors="surrogatepass")


@given(data=st.binary(max_size=2000), name=st.sampled_from(["f.csv", "f.xlsx", "f.txt"]))
@settings(max_examples=200, deadline=None)
def test_any_bytes_are_read_or_refused_naming_the_file(data: bytes, name: str) -> None:
    try:
        sheet = files.read_sheet(data, name)
    except ValidationFailed as exc:
        assert exc.field == "file" and exc.message
    else:
        assert sheet.columns
        for row in sheet.rows:
            assert set(row.values) <= set(sheet.columns)


def _count(db, *models) -> tuple[int, ...]:  # type: ignore[no-untyped-def]
    return tuple(db.scalar(select(func.count()).select_from(m)) for m in models)


_ROTOR_TYPE_COLUMNS = ["customer", "part_number", "mass_kg", "service_speed_rpm",
                       "bearing_a_mm", "bearing_b_mm", "centre_of_mass_mm", "plane_1_mm",
                       "plane_2_mm", "radius_1_mm", "radius_2_mm", "tolerance_grade",
                       "first_position_1_deg", "kind", "method_1"]
_JOB_COLUMNS = ["customer", "serial_number", "number", "received_on", "dispatched_on",
                "residual_unit", "residual_1", "residual_2", "residual_1_angle_deg",
                "verdict", "tolerance_gmm_1"]


@given(rows=st.lists(st.lists(_CELL, min_size=len(_ROTOR_TYPE_COLUMNS),
                              max_size=len(_ROTOR_TYPE_COLUMNS)), min_size=1, max_size=4),
       delimiter=st.sampled_from([",", ";"]))
@FIXTURE_OK
def test_fuzzed_rotor_types_give_a_result_per_row_and_store_only_finite_values(
        db, shop, make_user, rows, delimiter) -> None:
    _run_fuzz(db, shop, _admin(db, make_user), "rotor-types", _ROTOR_TYPE_COLUMNS, rows,
              delimiter)


def _admin(db, make_user) -> User:  # type: ignore[no-untyped-def]
    """One admin for all examples of a test (hypothesis reuses the function's fixtures)."""
    return db.scalars(select(User).where(User.role == "admin")).first() or make_user("admin")


def _run_fuzz(db, shop, admin: User, kind: str, columns: list[str],  # type: ignore[no-untyped-def]
              rows: list[list[str]], delimiter: str) -> None:
    if db.scalars(select(Customer).where(Customer.name == "Brackwater Pumps (invented)")
                  ).first() is None:
        customer = shop.customer(name="Brackwater Pumps (invented)")
        shop.rotor(shop.rotor_type(customer), serial_number="BW-1001")
        db.commit()
    data = _csv(columns, rows, delimiter)
    before = _count(db, Customer, RotorType, Job, ImportedJob, ImportBatch, AuditEvent)
    try:
        sheet = files.read_sheet(data, "fuzz.csv")
    except ValidationFailed as exc:
        assert exc.field == "file"
        return
    try:
        report = service.preview(db, by=admin, kind=kind, sheet=sheet)
    except ValidationFailed as exc:
        assert exc.field == "file"  # a header the fuzz made unknown
        return
    assert _count(db, Customer, RotorType, Job, ImportedJob, ImportBatch, AuditEvent) == before
    assert len(report.rows) == len(sheet.rows)
    for r in report.rows:
        assert r.action in service.ACTIONS
        if r.action == "refused":
            assert r.reason
    savepoint = db.begin_nested()
    try:
        service.apply(db, by=admin, kind=kind, sheet=sheet)
    except service.ImportRefused:
        assert _count(db, Customer, RotorType, Job, ImportedJob, ImportBatch,
                      AuditEvent) == before
    else:
        for rt in db.scalars(select(RotorType)):
            for name in ("mass_kg", "service_speed_rpm", "bearing_b_mm", "radius_1_mm"):
                assert math.isfinite(getattr(rt, name))
        for record in db.scalars(select(ImportedJob)):
            assert math.isfinite(record.residual_1_gmm)
    finally:
        savepoint.rollback()


@given(rows=st.lists(st.lists(_CELL, min_size=len(_JOB_COLUMNS), max_size=len(_JOB_COLUMNS)),
                     min_size=1, max_size=4),
       delimiter=st.sampled_from([",", ";"]))
@FIXTURE_OK
def test_fuzzed_past_jobs_give_a_result_per_row_and_store_only_finite_values(
        db, shop, make_user, rows, delimiter) -> None:
    _run_fuzz(db, shop, _admin(db, make_user), "jobs", _JOB_COLUMNS, rows, delimiter)
