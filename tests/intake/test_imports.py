"""Readings from the machine (issue 14 part 2): exchange files, mapped exports, the watched
folder, refusals by row, nothing written unless all of it is.

The sample files in tests/data/intake/ are invented (README there). Expected values come
from the files themselves and from the angle rule written beside each check, never from
the code under test.
"""

from __future__ import annotations

import html
import re
import shutil
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from shopapp.accounts import api_tokens
from shopapp.core.errors import PermissionDenied
from shopapp.intake import files, imports, mappings
from shopapp.jobs.intake import ToleranceSpec, book_in
from shopapp.jobs.runs import record_run
from shopapp.jobs.states import mark_in_tolerance
from shopapp.models import AuditEvent, ImportedFile, Job, Run

DATA = Path(__file__).resolve().parent.parent / "data" / "intake"
EXCHANGE_HEADER = b"".join((DATA / "exchange-runs.csv").read_bytes().splitlines(True)[:2])

# The invented machine's export layout (tests/data/intake/machine-export.csv).
BAY2_MAPPING: dict[str, Any] = {
    "delimiter": ";", "decimal_mark": ",", "skip_rows": 2, "encoding": "utf-8",
    "angle_sense": "against_rotation", "angle_zero_deg": 90, "speed_unit": "rpm",
    "reading_unit": "",
    "columns": {"serial": "Rotor", "purpose": "Step", "speed_rpm": "Speed", "unit": "Unit",
                "amplitude_1": "Amp A", "angle_1_deg": "Phase A", "amplitude_2": "Amp B",
                "angle_2_deg": "Phase B", "taken_at": "Time"},
}


@pytest.fixture()
def op(make_user):  # type: ignore[no-untyped-def]
    return make_user("operator", username="olga.op")


@pytest.fixture()
def quality(make_user):  # type: ignore[no-untyped-def]
    return make_user("quality", username="quinn.q")


@pytest.fixture()
def bay2(shop):  # type: ignore[no-untyped-def]
    return shop.machine(name="Bay 2", min_speed_rpm=100.0, max_speed_rpm=2500.0,
                        reading_unit="g·mm")


@pytest.fixture()
def rt(shop):  # type: ignore[no-untyped-def]
    return shop.rotor_type()


def book(db: Session, op: Any, machine: Any, rt: Any, serial: str = "IX-101") -> Job:
    job = book_in(db, by=op, customer=rt.customer_id, serial_number=serial,
                  rotor_type_id=rt.id, balancing_speed_rpm=600.0, machine_id=machine.id,
                  tolerance=ToleranceSpec("grade", grade=6.3))
    db.commit()
    return job


def runs_of(db: Session, job: Job) -> list[Run]:
    return list(db.scalars(select(Run).where(Run.job_id == job.id).order_by(Run.seq)))


def count(db: Session, model: Any) -> int:
    return int(db.scalar(select(func.count()).select_from(model)) or 0)


# --------------------------------------------------------------------------- exchange format


@pytest.mark.parametrize("name", ["exchange-runs.csv", "exchange-runs.json"])
def test_exchange_file_imports_every_run_with_its_source(db, op, bay2, rt, name) -> None:
    job = book(db, op, bay2, rt)
    data = (DATA / name).read_bytes()
    plan = imports.import_file(db, data, file_name=name, machine=bay2, by=op, source="file")
    db.commit()
    assert plan.ok and [r.seq for r in plan.runs] == [1, 2]
    got = runs_of(db, job)
    # The file's values (tests/data/intake/exchange-runs.*), shopapp's own angles.
    assert [(r.purpose, r.speed_rpm) for r in got] == [("initial", 600.0), ("check", 600.0)]
    assert [(x.plane, x.amplitude, x.angle_deg, x.unit) for x in got[0].readings] == [
        (1, 820.0, 35.0, "g·mm"), (2, 410.0, 210.0, "g·mm")]
    assert got[0].notes == "first spin"
    assert got[0].taken_at.isoformat() == "2026-11-03T09:15:00+00:00"
    sources = db.scalars(select(AuditEvent).where(AuditEvent.action == "import_run",
                                                  AuditEvent.job_id == job.id)
                         .order_by(AuditEvent.id)).all()
    assert [e.after["source"]["line"] for e in sources] == (
        ["line 3", "line 4"] if name.endswith(".csv") else ["run 1", "run 2"])
    assert {e.after["source"]["sha256"] for e in sources} == {imports.sha256_of(data)}
    assert {e.after["source"]["file"] for e in sources} == {name}
    assert db.scalars(select(ImportedFile)).one().sha256 == imports.sha256_of(data)


def test_the_same_file_is_never_imported_twice(db, op, bay2, rt) -> None:
    job = book(db, op, bay2, rt)
    data = (DATA / "exchange-runs.csv").read_bytes()
    imports.import_file(db, data, file_name="a.csv", machine=bay2, by=op, source="file")
    db.commit()
    with pytest.raises(imports.ImportRefused) as exc:
        imports.import_file(db, data, file_name="renamed.csv", machine=bay2, by=op,
                            source="file")
    db.rollback()
    assert "already imported" in exc.value.plan.refusal and "'a.csv'" in exc.value.plan.refusal
    assert len(runs_of(db, job)) == 2


def test_preview_writes_nothing_and_names_the_runs(db, op, bay2, rt) -> None:
    job = book(db, op, bay2, rt)
    before = count(db, AuditEvent)
    plan = imports.plan_file(db, (DATA / "exchange-runs.json").read_bytes(),
                             file_name="x.json", machine=bay2, by=op)
    assert plan.ok
    assert [(r.job_number, r.seq) for r in plan.runs] == [(job.number, 1), (job.number, 2)]
    assert plan.runs[1].summary == "check run at 600 rpm, 2 planes in g·mm"
    db.commit()
    assert runs_of(db, job) == [] and count(db, ImportedFile) == 0
    assert count(db, AuditEvent) == before
    assert db.get(Job, job.id).state == "booked_in"


def test_an_owner_may_not_import(db, op, bay2, rt, make_user) -> None:
    book(db, op, bay2, rt)
    with pytest.raises(PermissionDenied):
        imports.import_file(db, (DATA / "exchange-runs.csv").read_bytes(), file_name="a.csv",
                            machine=bay2, by=make_user("owner"), source="file")


# --------------------------------------------------------------------------- bad input


@pytest.mark.parametrize(("name", "where", "says"), [
    ("bad-truncated.csv", "line 4", "has 6 fields, the header has 16"),
    ("bad-text-in-number.csv", "line 3", "speed_rpm: Not a number: 'six hundred'"),
    ("bad-unit.csv", "line 3", "unit 'furlongs' is not known"),
    ("bad-angle.csv", "line 3", "angle_1_deg: 365° is out of range (0–360°)"),
    ("bad-duplicate.csv", "line 4", "repeats line 3"),
])
def test_bad_rows_are_refused_by_row_and_nothing_is_written(db, op, bay2, rt, name, where,
                                                            says) -> None:
    job = book(db, op, bay2, rt)
    with pytest.raises(imports.ImportRefused) as exc:
        imports.import_file(db, (DATA / name).read_bytes(), file_name=name, machine=bay2,
                            by=op, source="file")
    db.rollback()
    refused = {r.where: r.refusal for r in exc.value.plan.refused}
    assert where in refused and says in refused[where], refused
    assert runs_of(db, job) == [] and count(db, ImportedFile) == 0


def test_text_in_a_number_column_names_each_bad_cell(db, op, bay2, rt) -> None:
    book(db, op, bay2, rt)
    plan = imports.plan_file(db, (DATA / "bad-text-in-number.csv").read_bytes(),
                             file_name="t.csv", machine=bay2, by=op)
    assert "amplitude_1: Not a number: '1.2e'" in plan.runs[1].refusal


def test_a_file_in_the_wrong_encoding_is_refused_with_its_line(db, op, bay2, rt) -> None:
    book(db, op, bay2, rt)
    plan = imports.plan_file(db, (DATA / "bad-encoding.csv").read_bytes(),
                             file_name="e.csv", machine=bay2, by=op)
    # 0xFC is "ü" in cp1252; never valid as a single byte in UTF-8 (RFC 3629).
    assert plan.refusal.startswith("line 3: byte 0xFC is not utf-8 text")


def test_a_thousands_separator_is_refused_not_guessed(db, op, bay2, rt, quality) -> None:
    book(db, op, bay2, rt)
    mappings.save_mapping(db, bay2, BAY2_MAPPING, by=quality)
    plan = imports.plan_file(db, (DATA / "bad-thousands-separator.csv").read_bytes(),
                             file_name="m.csv", machine=bay2, by=op)
    assert "holds '.', but this file's decimal mark is ','" in plan.runs[0].refusal


def test_a_job_in_the_wrong_state_refuses_the_whole_file(db, op, bay2, rt) -> None:
    job = book(db, op, bay2, rt)
    other = book(db, op, bay2, rt, serial="IX-102")
    # IX-102 is measured as received, passes a check run and is marked in tolerance: no
    # more runs for it.
    imports.import_file(db, EXCHANGE_HEADER
                        + b",IX-102,initial,600,g\xc2\xb7mm,20,1,10,2,,,,,,,\n"
                        + b",IX-102,check,600,g\xc2\xb7mm,20,1,10,2,,,,,,,\n",
                        file_name="first.csv", machine=bay2, by=op, source="file")
    db.commit()
    mark_in_tolerance(db, other, by=op)
    db.commit()
    data = (DATA / "exchange-runs.csv").read_bytes().replace(b"IX-101,check", b"IX-102,check")
    with pytest.raises(imports.ImportRefused) as exc:
        imports.import_file(db, data, file_name="both.csv", machine=bay2, by=op, source="file")
    db.rollback()
    refused = {r.where: r.refusal for r in exc.value.plan.refused}
    assert list(refused) == ["line 4"] and "is in tolerance" in refused["line 4"]
    assert runs_of(db, job) == []  # line 3 was fine, and still nothing was written


def test_a_job_on_another_machine_is_refused(db, op, bay2, rt, shop) -> None:
    book(db, op, shop.machine(name="Bay 1", min_speed_rpm=100.0), rt)
    plan = imports.plan_file(db, (DATA / "exchange-runs.csv").read_bytes(),
                             file_name="a.csv", machine=bay2, by=op)
    assert "is booked on Bay 1, this file comes from Bay 2" in plan.runs[0].refusal


def test_a_200_mb_file_is_refused_without_reading_it(tmp_path, monkeypatch) -> None:
    big = tmp_path / "huge.csv"
    with big.open("wb") as fh:  # sparse: 200 MB long, nothing written to disk
        fh.truncate(200 * 1024 * 1024)
    opened: list[Any] = []
    real_open = Path.open
    monkeypatch.setattr(Path, "open", lambda self, *a, **k: opened.append(self)
                        or real_open(self, *a, **k))
    with pytest.raises(Exception) as exc:
        files.read_bytes(big)
    assert "at most 2097152 bytes (2 MiB)" in str(exc.value)
    assert opened == []  # refused from its size alone


def test_unknown_format_without_a_mapping_says_what_to_do(db, op, bay2, rt) -> None:
    book(db, op, bay2, rt)
    plan = imports.plan_file(db, (DATA / "machine-export.csv").read_bytes(),
                             file_name="m.csv", machine=bay2, by=op)
    assert "machine Bay 2 has no saved column mapping" in plan.refusal


def test_json_numbers_given_as_text_are_refused(db, op, bay2, rt) -> None:
    book(db, op, bay2, rt)
    doc = (b'{"format": "shopapp-runs", "version": 1, "runs": [{"serial": "IX-101", '
           b'"purpose": "initial", "speed_rpm": "600", "unit": "um", "amplitude_1": NaN, '
           b'"angle_1_deg": 10}]}')
    plan = imports.plan_file(db, doc, file_name="j.json", machine=bay2, by=op)
    assert "speed_rpm: must be a number, got '600'" in plan.runs[0].refusal
    assert "amplitude_1: must be a number, got 'NaN'" in plan.runs[0].refusal


# --------------------------------------------------------------------------- mappings


def test_mapping_preview_reads_the_sample_in_our_convention(quality) -> None:
    parsed = mappings.preview((DATA / "machine-export.csv").read_bytes(), BAY2_MAPPING)
    first = parsed.rows[0].values
    # The machine counts against rotation from a zero 90° after the mark, so its 55° is
    # ours (90 − 55) = 35° and its 240° is (90 − 240) mod 360 = 210°.
    assert (first["angle_1_deg"], first["angle_2_deg"]) == (35.0, 210.0)
    assert (first["amplitude_1"], first["amplitude_2"], first["unit"]) == (820.0, 410.5, "g·mm")


def test_mapping_names_what_is_missing(db, quality, bay2) -> None:
    from shopapp.core.errors import ValidationFailed

    bad = {**BAY2_MAPPING, "columns": {"serial": "Rotor", "angle_1_deg": "Rotor"},
           "angle_zero_deg": 400}
    with pytest.raises(ValidationFailed) as exc:
        mappings.save_mapping(db, bay2, bad, by=quality)
    assert {"column_purpose", "column_amplitude_1", "angle_zero_deg",
            "reading_unit"} <= set(exc.value.errors)


def test_only_quality_or_admin_save_a_mapping(db, op, bay2) -> None:
    with pytest.raises(PermissionDenied):
        mappings.save_mapping(db, bay2, BAY2_MAPPING, by=op)


# --------------------------------------------------------------------------- CLI


def test_cli_file_dry_run_then_import(runner, db, op, bay2, rt, tmp_path) -> None:
    job = book(db, op, bay2, rt)
    path = tmp_path / "runs.csv"
    shutil.copy(DATA / "exchange-runs.csv", path)
    dry = runner.invoke(args=["intake", "file", str(path), "--machine", "Bay 2",
                              "--user", "olga.op", "--dry-run"])
    assert dry.exit_code == 0, dry.output
    assert f"line 4: job {job.number} run 2: check run" in dry.output
    assert runs_of(db, job) == []
    done = runner.invoke(args=["intake", "file", str(path), "--machine", "Bay 2",
                               "--user", "olga.op"])
    assert done.exit_code == 0 and "imported 2 runs" in done.output
    again = runner.invoke(args=["intake", "file", str(path), "--user", "olga.op"])
    assert again.exit_code == 1 and "already imported" in again.output
    assert len(runs_of(db, job)) == 2


def test_cli_file_refused_prints_each_row(runner, db, op, bay2, rt) -> None:
    book(db, op, bay2, rt)
    out = runner.invoke(args=["intake", "file", str(DATA / "bad-unit.csv"), "--machine",
                              "Bay 2", "--user", "olga.op"])
    assert out.exit_code == 1
    assert "line 3: REFUSED: unit: unit 'furlongs' is not known" in out.output
    assert "nothing was written" in out.output


def test_watch_moves_files_to_done_and_refused(runner, db, op, bay2, rt, quality,
                                              tmp_path) -> None:
    job = book(db, op, bay2, rt)
    mappings.save_mapping(db, bay2, BAY2_MAPPING, by=quality)
    db.commit()
    shutil.copy(DATA / "machine-export.csv", tmp_path / "run-0001.csv")
    shutil.copy(DATA / "bad-angle.csv", tmp_path / "run-0002.csv")
    (tmp_path / "run-0003.csv.part").write_bytes(b"still being written")
    out = runner.invoke(args=["intake", "watch", str(tmp_path), "--machine", "Bay 2",
                              "--user", "olga.op", "--once", "--settle", "0"])
    assert out.exit_code == 0, out.output
    assert (tmp_path / "done" / "run-0001.csv").exists()
    assert (tmp_path / "refused" / "run-0002.csv").exists()
    why = (tmp_path / "refused" / "run-0002.csv.why.txt").read_text()
    assert "line 3: angle_1_deg: 365° is out of range (0–360°)" in why
    assert (tmp_path / "run-0003.csv.part").exists()  # partial names are left alone
    assert [r.purpose for r in runs_of(db, job)] == ["initial", "check"]
    src = db.scalars(select(AuditEvent).where(AuditEvent.action == "import_run")).first()
    assert src.after["source"]["file"] == "run-0001.csv"


def test_watch_stopped_after_the_commit_only_moves_the_file_next_time(
        runner, db, op, bay2, rt, quality, tmp_path) -> None:
    """Stopped between the commit and the move: the next scan imports nothing again."""
    job = book(db, op, bay2, rt)
    mappings.save_mapping(db, bay2, BAY2_MAPPING, by=quality)
    data = (DATA / "machine-export.csv").read_bytes()
    imports.import_file(db, data, file_name="run-0001.csv", machine=bay2, by=op,
                        source="watch")
    db.commit()  # the first process got this far, then stopped
    (tmp_path / "run-0001.csv").write_bytes(data)
    out = runner.invoke(args=["intake", "watch", str(tmp_path), "--machine", "Bay 2",
                              "--user", "olga.op", "--once", "--settle", "0"])
    assert "already imported" in out.output
    assert (tmp_path / "done" / "run-0001.csv").exists()
    assert len(runs_of(db, job)) == 2


def test_watch_stopped_mid_file_leaves_nothing_half_written(
        runner, db, op, bay2, rt, quality, tmp_path, monkeypatch) -> None:
    """Stopped inside the import (here: at the second run): no run kept, the file stays."""
    job = book(db, op, bay2, rt)
    mappings.save_mapping(db, bay2, BAY2_MAPPING, by=quality)
    db.commit()
    shutil.copy(DATA / "machine-export.csv", tmp_path / "run-0001.csv")
    real = imports.record_run
    calls: list[int] = []

    def stop_at_second(*a: Any, **k: Any) -> Any:
        calls.append(1)
        if len(calls) == 2:
            raise KeyboardInterrupt
        return real(*a, **k)

    monkeypatch.setattr(imports, "record_run", stop_at_second)
    runner.invoke(args=["intake", "watch", str(tmp_path), "--machine", "Bay 2",
                        "--user", "olga.op", "--once", "--settle", "0"])
    assert runs_of(db, job) == [] and (tmp_path / "run-0001.csv").exists()
    monkeypatch.setattr(imports, "record_run", real)
    again = runner.invoke(args=["intake", "watch", str(tmp_path), "--machine", "Bay 2",
                                "--user", "olga.op", "--once", "--settle", "0"])
    assert "imported 2 runs" in again.output
    assert len(runs_of(db, job)) == 2


# --------------------------------------------------------------------------- done when


def _verdict_table(client: Any, job: Job, seq: int) -> str:
    body = html.unescape(client.get(f"/jobs/{job.id}").get_data(as_text=True))
    found = re.search(rf'<table class="verdict" id="verdict-{seq}">.*?</table>', body, re.S)
    assert found, f"no verdict table for run {seq} of {job.number}"
    return found.group(0)


def test_imported_runs_get_the_same_verdict_as_typed_ones(
        app, client, login_as, db, rt, bay2, quality, tmp_path) -> None:
    """The issue's "done when": typed, mapped CSV, watched folder and JSON API runs with the
    same numbers show the same verdict on the job page."""
    typist = login_as("operator", username="tess.typist")
    jobs = {how: book(db, typist, bay2, rt, serial=f"IX-{n}")
            for n, how in enumerate(("typed", "mapped", "watched", "api"), start=201)}
    mappings.save_mapping(db, bay2, BAY2_MAPPING, by=quality)
    for job in jobs.values():  # the initial run comes first (jobs.runs.record_run)
        record_run(db, job, by=typist, purpose="initial", speed_rpm=600,
                   readings=[(1, 9000.0, 30.0, "g·mm"), (2, 7000.0, 200.0, "g·mm")])
    db.commit()
    # One check run: 2400 g·mm at 30° in plane 1, 900 g·mm at 200° in plane 2 (ours).
    typed = client.post(f"/jobs/{jobs['typed'].id}/runs", data={
        "run-purpose": "check", "run-speed_rpm": "600", "run-unit": "g·mm",
        "run-amplitude_1": "2400", "run-angle_1_deg": "30",
        "run-amplitude_2": "900", "run-angle_2_deg": "200"})
    assert typed.status_code == 302, typed.get_data(as_text=True)[:500]

    # The machine's convention: against rotation from a zero 90° after the mark, so ours
    # 30° is its (90 − 30) = 60°, ours 200° its (90 − 200) mod 360 = 250°.
    def export(serial: str) -> bytes:
        return ("Balancer export;Bay 2\nPrinted;2026-11-03\n"
                "Rotor;Step;Speed;Unit;Amp A;Phase A;Amp B;Phase B;Time\n"
                f"{serial};check;600;gmm;2400,0;60;900,0;250;2026-11-03T10:00:00\n"
                ).encode()

    path = tmp_path / "bay2-export.csv"
    path.write_bytes(export("IX-202"))
    mapped = app.test_cli_runner().invoke(args=[
        "intake", "file", str(path), "--machine", "Bay 2", "--user", "tess.typist"])
    assert mapped.exit_code == 0, mapped.output
    watched = tmp_path / "watched"
    watched.mkdir()
    (watched / "run-0001.csv").write_bytes(export("IX-203"))
    out = app.test_cli_runner().invoke(args=[
        "intake", "watch", str(watched), "--machine", "Bay 2", "--user", "tess.typist",
        "--once", "--settle", "0"])
    assert "imported 1 run" in out.output, out.output
    token = api_tokens.create_token(db, by=typist, user=typist, name="bay 2 script").secret
    db.commit()
    api = client.post(f"/api/v1/jobs/{jobs['api'].id}/runs", headers={
        "Authorization": f"Bearer {token}"}, json={
        "purpose": "check", "speed_rpm": 600, "unit": "g·mm", "readings": [
            {"plane": 1, "amplitude": 2400, "angle_deg": 30},
            {"plane": 2, "amplitude": 900, "angle_deg": 200}]})
    assert api.status_code == 201, api.get_data(as_text=True)

    tables = {how: _verdict_table(client, job, 2) for how, job in jobs.items()}
    assert tables["mapped"] == tables["typed"]
    assert tables["watched"] == tables["typed"]
    assert tables["api"] == tables["typed"]
    stored = {how: runs_of(db, job)[1].within_tolerance for how, job in jobs.items()}
    assert len(set(stored.values())) == 1 and stored["typed"] is not None
