"""Intake pages: a machine's run-file mapping; a file's preview (writes nothing) and its
import (exactly the previewed bytes, once)."""

from __future__ import annotations

import html
import io
import re
from typing import Any

from sqlalchemy import select

from shopapp.intake import files, mappings
from shopapp.models import ImportedFile, MachineMapping, Run
from tests.intake.test_imports import BAY2_MAPPING, DATA, book


def text(resp: Any) -> str:
    return html.unescape(resp.get_data(as_text=True))


def _mapping_form(**extra: Any) -> dict[str, Any]:
    form = {k: str(v) for k, v in BAY2_MAPPING.items() if k != "columns"}
    form.update({f"column_{k}": v for k, v in BAY2_MAPPING["columns"].items()})
    form.update(extra)
    return form


def test_quality_previews_a_sample_then_saves_the_mapping(client, login_as, db, shop) -> None:
    login_as("quality")
    machine = shop.machine(name="Bay 2", min_speed_rpm=100.0)
    db.commit()
    url = f"/machines/{machine.id}/run-file-mapping"
    assert client.get(url).status_code == 200
    sample = (io.BytesIO((DATA / "machine-export.csv").read_bytes()), "export.csv")
    shown = client.post(url, data=_mapping_form(sample=sample, preview="Preview"),
                        content_type="multipart/form-data")
    body = text(shown)
    assert shown.status_code == 200, body[:2000]
    table = re.search(r'<table id="mapping-preview">.*?</table>', body, re.S).group(0)
    # The sample's first row: the machine's 55° and 240° against rotation from 90° are
    # ours 90 − 55 = 35° and (90 − 240) mod 360 = 210°; 410,5 with a decimal comma is 410.5.
    first = re.findall(r"<td>(.*?)</td>", table.split("</tr>")[1])
    assert first[:10] == ["line 4", "—", "IX-101", "initial", "600", "g·mm", "820", "35",
                          "410.5", "210"]
    assert db.scalars(select(MachineMapping)).first() is None  # a preview saves nothing
    saved = client.post(url, data=_mapping_form(save="Save mapping"))
    assert saved.status_code == 302
    row = db.scalars(select(MachineMapping)).one()
    assert (row.delimiter, row.decimal_mark, row.angle_sense, row.angle_zero_deg) == (
        ";", ",", "against_rotation", 90.0)
    assert row.columns["amplitude_1"] == "Amp A"
    again = text(client.get(url))
    assert 'value="Amp A"' in again


def test_a_mapping_without_its_required_columns_is_refused_by_field(client, login_as, db,
                                                                    shop) -> None:
    login_as("quality")
    machine = shop.machine(name="Bay 2", min_speed_rpm=100.0)
    db.commit()
    resp = client.post(f"/machines/{machine.id}/run-file-mapping",
                       data=_mapping_form(column_purpose="", save="Save mapping"))
    assert resp.status_code == 422
    assert "required: which column of the export holds it?" in text(resp)


def _upload(client: Any, job_id: int | None, name: str, data: bytes | None = None) -> Any:
    payload: dict[str, Any] = {"file": (io.BytesIO(data if data is not None
                                                    else (DATA / name).read_bytes()), name)}
    if job_id is not None:
        payload["job_id"] = str(job_id)
    return client.post("/import/preview", data=payload, content_type="multipart/form-data")


def _confirm_fields(body: str) -> dict[str, str]:
    form = re.search(r'<form method="post" action="/import/confirm">.*?</form>', body, re.S)
    assert form, "no confirm button"
    return dict(re.findall(r'name="([a-z_0-9]+)"[^>]*value="([^"]*)"', form.group(0)))


def test_operator_previews_then_imports_on_the_job_page(client, login_as, db, shop) -> None:
    op = login_as("operator")
    machine = shop.machine(name="Bay 2", min_speed_rpm=100.0)
    job = book(db, op, machine, shop.rotor_type())
    page = text(client.get(f"/jobs/{job.id}"))
    assert f'href="/import?job={job.id}"' in page
    assert client.get(f"/import?job={job.id}").status_code == 200
    shown = _upload(client, job.id, "exchange-runs.csv")
    body = text(shown)
    assert shown.status_code == 200, body[:2000]
    assert f">{job.number}</a></td>" in body and "check run at 600 rpm" in body
    assert db.scalars(select(Run)).first() is None  # the preview wrote nothing
    fields = _confirm_fields(body)
    done = client.post("/import/confirm", data=fields)
    assert done.status_code == 302 and done.location.endswith(f"/jobs/{job.id}#runs")
    assert [r.seq for r in db.scalars(select(Run).where(Run.job_id == job.id))] == [1, 2]
    assert db.scalars(select(ImportedFile)).one().source == "upload"
    trail = text(client.get(f"/jobs/{job.id}")).split('id="audit"', 1)[1]
    assert "run import run" in trail
    assert '"file": "exchange-runs.csv"' in trail and '"line": "line 3"' in trail
    twice = client.post("/import/confirm", data=fields)  # the same form again
    assert twice.status_code == 303  # "This form was already saved" (core.web.once)
    assert len(db.scalars(select(Run)).all()) == 2
    again = text(_upload(client, job.id, "exchange-runs.csv"))
    assert "already imported" in again and "/import/confirm" not in again


def test_a_refused_file_has_no_import_button(client, login_as, db, shop) -> None:
    op = login_as("operator")
    job = book(db, op, shop.machine(name="Bay 2", min_speed_rpm=100.0), shop.rotor_type())
    shown = _upload(client, job.id, "bad-duplicate.csv")
    body = text(shown)
    assert shown.status_code == 422
    assert "repeats line 3" in body and "/import/confirm" not in body


def test_confirm_imports_only_what_this_session_previewed(client, login_as, db, shop) -> None:
    op = login_as("operator")
    job = book(db, op, shop.machine(name="Bay 2", min_speed_rpm=100.0), shop.rotor_type())
    fields = _confirm_fields(text(_upload(client, job.id, "exchange-runs.csv")))
    forged = {**fields, "sha256": "0" * 64}
    resp = client.post("/import/confirm", data=forged)
    assert resp.status_code == 302 and "/import" in resp.location
    assert db.scalars(select(Run)).first() is None


def test_the_job_list_imports_with_a_chosen_machine(client, login_as, db, shop, make_user
                                                    ) -> None:
    op = login_as("operator")
    machine = shop.machine(name="Bay 2", min_speed_rpm=100.0)
    job = book(db, op, machine, shop.rotor_type())
    mappings.save_mapping(db, machine, BAY2_MAPPING, by=make_user("quality"))
    db.commit()
    assert "/import" in text(client.get("/jobs"))
    data = (DATA / "machine-export.csv").read_bytes()
    shown = client.post("/import/preview", data={
        "file": (io.BytesIO(data), "export.csv"), "machine_id": str(machine.id)},
        content_type="multipart/form-data")
    assert shown.status_code == 200
    client.post("/import/confirm", data=_confirm_fields(text(shown)))
    assert len(db.scalars(select(Run).where(Run.job_id == job.id)).all()) == 2


def test_an_upload_above_the_limit_is_refused_before_it_is_read(client, login_as) -> None:
    login_as("operator")
    # A raw body (not a form): refused on its declared length, before anything parses it.
    resp = client.post("/import/preview", data=b"x" * (files.MAX_FILE_BYTES + 100 * 1024),
                       content_type="multipart/form-data; boundary=b", csrf=False)
    assert resp.status_code == 413
    assert "larger than 2 MiB" in text(resp)
