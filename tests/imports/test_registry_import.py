"""Customers, rotor types and rotors from spreadsheets: dry run, apply, updates, refusals.

The expected rows and counts are read off the sample files in tests/data/imports/ by hand
(invented data; the files are the reference, not the code under test).
"""

from __future__ import annotations

from pathlib import Path

import pytest
from sqlalchemy import func, select

from shopapp.core.errors import PermissionDenied, ValidationFailed
from shopapp.imports import files, service
from shopapp.imports.kinds import KINDS, template_csv
from shopapp.models import AuditEvent, Customer, ImportBatch, Rotor, RotorType

DATA = Path(__file__).resolve().parents[1] / "data" / "imports"


def sheet(name: str) -> files.Sheet:
    return files.read_sheet((DATA / name).read_bytes(), name)


def count(db, model) -> int:  # type: ignore[no-untyped-def]
    return db.scalar(select(func.count()).select_from(model))


def apply_all(db, user, *names: str) -> None:  # type: ignore[no-untyped-def]
    for name in names:
        kind = name.split(".")[0]
        service.apply(db, by=user, kind=kind, sheet=sheet(name))


def test_dry_run_reports_each_row_and_writes_nothing(db, make_user) -> None:
    admin = make_user("admin")
    before = (count(db, Customer), count(db, AuditEvent), count(db, ImportBatch))
    report = service.preview(db, by=admin, kind="customers", sheet=sheet("customers.csv"))
    # customers.csv: two new customers on lines 2 and 3 (read off the file).
    assert [(r.line, r.action) for r in report.rows] == [(2, "create"), (3, "create")]
    assert report.summary() == "2 rows: 2 create, 0 update, 0 unchanged, 0 refused"
    assert (count(db, Customer), count(db, AuditEvent), count(db, ImportBatch)) == before


def test_apply_then_again_is_unchanged_and_updates_only_given_columns(db, make_user) -> None:
    admin = make_user("admin")
    first = service.apply(db, by=admin, kind="customers", sheet=sheet("customers.csv"))
    assert first.count("create") == 2 and first.applied
    batch = db.get(ImportBatch, first.batch_id)
    assert (batch.kind, batch.rows, batch.created, batch.file_name) == (
        "customers", 2, 2, "customers.csv")
    again = service.apply(db, by=admin, kind="customers", sheet=sheet("customers.csv"))
    assert [r.action for r in again.rows] == ["unchanged", "unchanged"]
    # The semicolon file with a BOM changes the first customer's notes only (phone and
    # address are not columns of it and stay), and adds a third.
    third = service.apply(db, by=admin, kind="customers",
                          sheet=sheet("customers_semicolon_bom.csv"))
    assert [r.action for r in third.rows] == ["update", "create"]
    assert third.rows[0].reason == "changes notes"
    bw = db.scalars(select(Customer).where(Customer.name == "Brackwater Pumps (invented)")).one()
    assert (bw.notes, bw.phone, bw.address) == ("changed contact", "+00 100 200", "1 Sample Lane")
    # A notes cell starting with "=" is stored as text, never run, and the row says so.
    kestrel = db.scalars(select(Customer).where(Customer.name.like("Kestrel%"))).one()
    assert kestrel.notes == '=HYPERLINK("http://example.org")'
    assert "kept as text" in third.rows[1].note


def test_rotor_types_and_rotors_from_csv_and_xlsx(db, make_user) -> None:
    admin = make_user("admin")
    apply_all(db, admin, "customers.csv", "rotor-types.csv", "rotors.csv")
    rt = db.scalars(select(RotorType).where(RotorType.part_number == "BW-IMP-300")).one()
    # Values as written in rotor-types.csv line 2.
    assert (rt.mass_kg, rt.service_speed_rpm, rt.tolerance_grade, rt.kind) == (
        18.5, 2950.0, 6.3, "pump_impeller")
    assert count(db, Rotor) == 3
    report = service.apply(db, by=admin, kind="rotors", sheet=sheet("rotors.xlsx"))
    assert [r.action for r in report.rows] == ["create", "create"]
    # A serial typed as a number in the sheet is kept as its digits.
    assert db.scalars(select(Rotor).where(Rotor.serial_number == "4711")).one()


def test_rotor_update_changes_the_type_and_notes_through_the_registry(db, make_user) -> None:
    admin = make_user("admin")
    apply_all(db, admin, "customers.csv", "rotor-types.csv", "rotors.csv")
    data = (b"customer,serial_number,notes\n"
            b"Brackwater Pumps (invented),bw-1002,repaired shaft\n")
    report = service.apply(db, by=admin, kind="rotors", sheet=files.read_sheet(data, "u.csv"))
    assert [(r.action, r.reason) for r in report.rows] == [("update", "changes notes")]
    rotor = db.scalars(select(Rotor).where(Rotor.serial_number == "BW-1002")).one()
    assert rotor.notes == "repaired shaft"


@pytest.mark.parametrize("name, kind, line, column, words", [
    # Each expectation read off the sample file by hand.
    ("bad_truncated_rotors.csv", "rotors", 3, "", "cut short"),
    ("bad_text_in_numbers.csv", "rotor-types", 2, "mass_kg", "must be a number, got 'heavy'"),
    ("bad_duplicates.csv", "customers", 3, "name", "duplicate of line 2"),
])
def test_bad_rows_are_refused_with_their_reason_and_nothing_is_written(
        db, make_user, name, kind, line, column, words) -> None:
    admin = make_user("admin")
    apply_all(db, admin, "customers.csv", "rotor-types.csv")
    before = (count(db, Customer), count(db, RotorType), count(db, Rotor),
              count(db, AuditEvent), count(db, ImportBatch))
    with pytest.raises(service.ImportRefused) as caught:
        service.apply(db, by=admin, kind=kind, sheet=sheet(name))
    refused = caught.value.report.refused
    assert [(r.line, r.column) for r in refused] == [(line, column)]
    assert words in refused[0].reason
    assert (count(db, Customer), count(db, RotorType), count(db, Rotor),
            count(db, AuditEvent), count(db, ImportBatch)) == before


@pytest.mark.parametrize("name, words", [
    ("bad_encoding_latin1.csv", "line 2 is not UTF-8 text (byte 0xE9)"),
    ("bad_open_quote.csv", "line 2"),
    ("bad_unknown_column.csv", "unknown column 'mass_lb'"),
])
def test_bad_files_are_refused_whole(db, make_user, name, words) -> None:
    admin = make_user("admin")
    with pytest.raises(ValidationFailed) as caught:
        service.preview(db, by=admin, kind="rotor-types" if "column" in name else "customers",
                        sheet=sheet(name))
    assert caught.value.field == "file"
    assert words in caught.value.message


def test_a_file_over_the_limit_is_refused_before_reading(tmp_path) -> None:
    big = tmp_path / "big.csv"
    with big.open("wb") as fh:  # sparse: 200 MB on paper, nothing written to disk
        fh.truncate(200 * 1024 * 1024)
    assert files.size_refusal(big.stat().st_size) == (
        "the file has 200 MB; the limit is 20 MB: split it into several files")


def test_an_operator_may_import_the_registry_but_not_past_jobs(db, make_user) -> None:
    operator = make_user("operator")
    assert service.preview(db, by=operator, kind="customers", sheet=sheet("customers.csv"))
    with pytest.raises(PermissionDenied):
        service.preview(db, by=operator, kind="jobs", sheet=sheet("jobs.csv"))
    with pytest.raises(PermissionDenied):
        service.preview(db, by=make_user("owner"), kind="customers",
                        sheet=sheet("customers.csv"))


@pytest.mark.parametrize("kind", list(KINDS))
def test_every_template_reads_back_with_its_own_columns(kind) -> None:
    text = template_csv(KINDS[kind])
    read = files.read_sheet(text.encode(), f"{kind}.csv")
    assert read.columns == KINDS[kind].columns
    assert len(read.rows) == len(KINDS[kind].example)
