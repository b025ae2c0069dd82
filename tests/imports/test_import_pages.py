"""The import page: template, preview (nothing written), confirm applies exactly the
previewed bytes once, refusals shown per row, CSRF kept on.

Expected rows are read off tests/data/imports/ by hand.
"""

from __future__ import annotations

import hashlib
import io
import re
from pathlib import Path

from sqlalchemy import func, select

from shopapp.models import Customer, ImportBatch, Job

DATA = Path(__file__).resolve().parents[1] / "data" / "imports"
_HIDDEN = re.compile(r'name="(kind|sha256|file_name|form_token)"[^>]*value="([^"]*)"')


def upload(client, url: str, kind: str, name: str, data: bytes | None = None):  # type: ignore[no-untyped-def]
    body = data if data is not None else (DATA / name).read_bytes()
    return client.post(url, data={"kind": kind, "file": (io.BytesIO(body), name)},
                       content_type="multipart/form-data", form_token=False)


def confirm_fields(page: str) -> dict[str, str]:
    return {m.group(1): m.group(2) for m in _HIDDEN.finditer(page)}


def customers(db) -> int:  # type: ignore[no-untyped-def]
    return db.scalar(select(func.count()).select_from(Customer))


def test_template_download(client, login_as) -> None:
    login_as("owner")  # anyone may read a template
    resp = client.get("/imports/template?kind=rotors")
    assert resp.status_code == 200
    assert resp.headers["Content-Disposition"] == (
        'attachment; filename="shopapp-rotors-template.csv"')
    assert resp.get_data(as_text=True).splitlines()[0] == (
        "customer,serial_number,part_number,notes")


def test_preview_shows_names_as_typed_and_one_row_in_the_singular(client, login_as) -> None:
    # Before: "invented pumps ltd" (the duplicate check's lower case) and "1 rows".
    login_as("operator")
    body = b"name,contact\nInvented Pumps Ltd,J. Invented\n"
    page = upload(client, "/imports/registry", "customers", "one.csv", body)
    text = page.get_data(as_text=True)
    assert page.status_code == 200, text[:800]
    assert "<td>Invented Pumps Ltd</td>" in text and "invented pumps ltd" not in text
    assert "1 row: 1 create, 0 update, 0 unchanged, 0 refused" in text


def test_preview_writes_nothing_and_confirm_applies_once(client, login_as, db) -> None:
    login_as("operator")
    page = upload(client, "/imports/registry", "customers", "customers.csv")
    text = page.get_data(as_text=True)
    assert page.status_code == 200, text[:800]
    assert "2 rows: 2 create, 0 update, 0 unchanged, 0 refused" in text
    assert customers(db) == 0
    fields = confirm_fields(text)
    # The confirmation names the previewed bytes by their SHA-256.
    assert fields["sha256"] == hashlib.sha256((DATA / "customers.csv").read_bytes()).hexdigest()
    done = client.post("/imports/registry/apply", data=fields)
    assert done.status_code == 302
    assert customers(db) == 2
    batch = db.scalars(select(ImportBatch)).one()
    assert (batch.kind, batch.created, batch.file_sha256) == ("customers", 2, fields["sha256"])
    again = client.post("/imports/registry/apply", data=fields)  # back button, double click
    assert again.status_code == 303  # AlreadySaved: see what the first post saved
    assert db.scalar(select(func.count()).select_from(ImportBatch)) == 1


def test_a_refused_row_is_shown_and_offers_no_confirmation(client, login_as, db) -> None:
    login_as("quality")
    page = upload(client, "/imports/registry", "customers", "bad_duplicates.csv")
    text = page.get_data(as_text=True)
    assert page.status_code == 422
    assert "duplicate of line 2" in text
    assert "Apply this file" not in text
    assert customers(db) == 0


def test_a_bad_file_is_a_message_beside_the_file_field(client, login_as) -> None:
    login_as("quality")
    page = upload(client, "/imports/registry", "customers", "bad_encoding_latin1.csv")
    assert page.status_code == 422
    assert "line 2 is not UTF-8 text (byte 0xE9)" in page.get_data(as_text=True)


def test_past_jobs_page_and_the_imported_job_page(client, login_as, db) -> None:
    login_as("admin")
    for kind in ("customers", "rotor-types", "rotors"):
        text = upload(client, "/imports/registry", kind, f"{kind}.csv").get_data(as_text=True)
        assert client.post("/imports/registry/apply",
                           data=confirm_fields(text)).status_code == 302
    text = upload(client, "/imports/jobs", "jobs", "jobs.csv").get_data(as_text=True)
    assert "3 rows: 3 create" in text
    assert client.post("/imports/jobs/apply", data=confirm_fields(text)).status_code == 302
    job = db.scalars(select(Job).where(Job.number == "OLD-2019-014")).one()
    page = client.get(f"/jobs/{job.id}")
    assert page.status_code == 200
    # jobs.csv line 2: 12.5 and 10 g·mm, pass.
    assert "Imported past job" in page.get_data(as_text=True)
    assert "verdict pass" in page.get_data(as_text=True)


def test_a_post_without_csrf_token_is_refused(client, login_as, db) -> None:
    login_as("quality")
    resp = client.post("/imports/registry", csrf=False, form_token=False, data={
        "kind": "customers", "file": (io.BytesIO((DATA / "customers.csv").read_bytes()),
                                      "customers.csv")}, content_type="multipart/form-data")
    assert resp.status_code in (400, 422)
    assert customers(db) == 0
