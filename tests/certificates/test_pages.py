"""Certificate pages: issue from the queue, register, detail, downloads, reissue, void, /verify."""

from __future__ import annotations

import csv
import hashlib
import io
import re
import zipfile

import pytest

from shopapp.certificates import issue as certificates
from shopapp.models import Certificate, MachineVerification
from tests.reports.samples import job_ready_for_certificate


@pytest.fixture()
def ready(db, shop, make_user):  # type: ignore[no-untyped-def]
    """A job waiting for its certificate (committed, so the views see it)."""
    operator = make_user("operator", full_name="Ola Operator")
    job = job_ready_for_certificate(db, shop, operator)
    db.commit()
    return job


def _issue(client, job):  # type: ignore[no-untyped-def]
    return client.post(f"/certificates/issue/{job.id}")


def test_quality_sees_the_queue_and_issues(client, login_as, ready, db) -> None:
    login_as("quality")
    home = client.get("/").get_data(as_text=True)
    assert "Certificates to issue" in home and ready.number in home
    resp = _issue(client, ready)
    assert resp.status_code == 302
    cert = db.query(Certificate).filter_by(job_id=ready.id).one()
    page = client.get(resp.headers["Location"]).get_data(as_text=True)
    assert cert.number in page and "valid" in page and "<svg" in page
    db.refresh(ready)
    assert ready.state == "certified"


def test_the_register_says_how_many_jobs_wait_and_links_them(client, login_as, ready,
                                                             db) -> None:
    # A walk found the queue only on the start page, not from /certificates/.
    login_as("quality")
    page = client.get("/certificates/").get_data(as_text=True)
    assert "1 job in tolerance waiting for a certificate" in page
    assert "/jobs?state=in_tolerance" in page or "/jobs/?state=in_tolerance" in page


def test_operator_may_not_issue(client, login_as, ready, db) -> None:
    login_as("operator")
    assert _issue(client, ready).status_code == 403
    assert "Certificates to issue" not in client.get("/").get_data(as_text=True)
    assert db.query(Certificate).filter_by(job_id=ready.id).count() == 0


def test_issue_without_csrf_token_is_refused(client, login_as, ready, db) -> None:
    login_as("quality")
    resp = client.post(f"/certificates/issue/{ready.id}", csrf=False)
    assert resp.status_code == 400
    assert db.query(Certificate).filter_by(job_id=ready.id).count() == 0


def test_refusal_shows_its_message_and_saves_nothing(client, login_as, ready, db) -> None:
    db.add(MachineVerification(machine_id=ready.machine_id, performed_on=ready.received_on
                               .replace(year=2020), proving_rotor="PR-1", passed=True))
    db.commit()
    login_as("quality")
    resp = _issue(client, ready)
    assert resp.status_code == 409
    assert "is overdue for its proving test since" in resp.get_data(as_text=True)
    assert db.query(Certificate).filter_by(job_id=ready.id).count() == 0


def test_register_search_detail_and_download(client, login_as, ready, db) -> None:
    login_as("quality")
    _issue(client, ready)
    cert = db.query(Certificate).filter_by(job_id=ready.id).one()
    page = client.get("/certificates/", query_string={"serial": ready.rotor.serial_number})
    assert page.status_code == 200 and cert.number in page.get_data(as_text=True)
    none = client.get("/certificates/", query_string={"serial": "no-such-serial"})
    assert cert.number not in none.get_data(as_text=True)
    bad = client.get("/certificates/", query_string={"date_from": "2026-02-01",
                                                       "date_to": "2026-01-01"})
    assert bad.status_code == 422 and "must not be before" in bad.get_data(as_text=True)
    pdf = client.get(f"/certificates/{cert.id}/pdf")
    assert pdf.mimetype == "application/pdf"
    assert hashlib.sha256(pdf.data).hexdigest() == cert.pdf_sha256
    assert f"{cert.number}-rev1.pdf" in pdf.headers["Content-Disposition"]


def test_register_page_queries_are_bounded(client, login_as, db, shop, make_user,
                                           count_queries) -> None:
    operator, quality = make_user("operator"), make_user("quality")
    for _ in range(3):
        certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    db.commit()
    login_as("owner")
    with count_queries() as few:
        client.get("/certificates/")
    for _ in range(3):
        certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    db.commit()
    with count_queries() as more:
        client.get("/certificates/")
    assert more.count == few.count


def test_a_superseded_revision_says_so_once_and_names_the_latest(client, login_as, ready,
                                                                   db) -> None:
    # The walk: revision 1's page read "void: superseded by revision 2 since 2026-12-04 —
    # superseded by revision 2"; with a third revision it named revision 3 as the one
    # that replaced it and then revision 2 again.
    login_as("quality")
    _issue(client, ready)
    first = db.query(Certificate).filter_by(job_id=ready.id).one()
    assert client.post(f"/certificates/{first.id}/reissue",
                       data={"reason": "drawing revision"}).status_code == 302
    second = db.query(Certificate).filter_by(job_id=ready.id, revision=2).one()

    def status_line(cert_id: int) -> str:
        page = client.get(f"/certificates/{cert_id}").get_data(as_text=True)
        line = re.search(r"</h1>\s*<p>(.*?)</p>", page, re.S)
        assert line is not None
        return " ".join(re.sub(r"<[^>]+>", "", line.group(1)).split())

    db.refresh(first)
    day = first.voided_at.date().isoformat()
    assert status_line(first.id) == f"void: superseded by revision 2 since {day}"
    assert client.post(f"/certificates/{second.id}/reissue",
                       data={"reason": "customer order number"}).status_code == 302
    assert status_line(first.id) == (f"void: superseded by revision 2 (the latest is "
                                     f"revision 3) since {day}")


def test_reissue_and_void_pages(client, login_as, ready, db) -> None:
    login_as("quality")
    _issue(client, ready)
    cert = db.query(Certificate).filter_by(job_id=ready.id).one()
    empty = client.post(f"/certificates/{cert.id}/reissue", data={"reason": ""})
    assert empty.status_code == 422 and "is required" in empty.get_data(as_text=True)
    resp = client.post(f"/certificates/{cert.id}/reissue",
                       data={"reason": "customer asked for the drawing revision"})
    assert resp.status_code == 302
    new = db.query(Certificate).filter_by(job_id=ready.id, revision=2).one()
    db.refresh(cert)
    assert cert.state == "void" and cert.void_reason == "superseded by revision 2"
    resp = client.post(f"/certificates/{new.id}/void", data={"reason": "rotor was scrapped"})
    assert resp.status_code == 302
    db.refresh(new)
    assert new.state == "void" and new.void_reason == "rotor was scrapped"
    again = client.post(f"/certificates/{new.id}/void", data={"reason": "twice by mistake"})
    assert again.status_code == 409 and "already void" in again.get_data(as_text=True)


def test_owner_may_read_but_not_void(client, login_as, db, shop, make_user) -> None:
    cert = certificates.issue(db, job_ready_for_certificate(db, shop, make_user("operator")),
                              by=make_user("quality"))
    db.commit()
    login_as("owner")
    assert client.get(f"/certificates/{cert.id}").status_code == 200
    assert client.post(f"/certificates/{cert.id}/void",
                       data={"reason": "not my job to do"}).status_code == 403


def test_verify_page_is_public_and_answers_each_state(client, db, shop, make_user) -> None:
    quality = make_user("quality")
    first = certificates.issue(db, job_ready_for_certificate(db, shop, make_user("operator")),
                               by=quality)
    db.commit()

    def ask(q: str) -> str:
        resp = client.get("/verify", query_string={"q": q})
        assert resp.status_code == 200
        return resp.get_data(as_text=True)

    # Issue 15: the number alone answers only that it exists; number + code shows the state.
    page = ask(first.number)
    assert "Number found" in page and "revision 1 is valid" not in page
    page = client.get("/verify", query_string={"n": first.number,
                                               "c": first.verification_code}).get_data(as_text=True)
    assert "Genuine and valid" in page and f"{first.number} revision 1 is valid" in page
    assert "Quinn" not in page  # only the first lines, not who signed
    second = certificates.reissue(db, first, by=quality, reason="order reference corrected")
    db.commit()
    assert "superseded by revision 2" in ask(first.pdf_sha256)
    certificates.void(db, second, by=quality, reason="rotor scrapped by the customer")
    db.commit()
    page = ask(second.data_sha256)
    assert "Genuine, void" in page and "rotor scrapped by the customer" in page
    assert "Not found" in ask("BC-1990-00001")
    assert client.get("/verify").status_code == 200  # the empty form
    assert client.get("/verify", query_string={"q": ""}).status_code == 422


def test_audit_zip_download(client, login_as, ready, db) -> None:
    login_as("quality")
    _issue(client, ready)
    cert = db.query(Certificate).filter_by(job_id=ready.id).one()
    day = cert.issued_at.date().isoformat()
    resp = client.get("/certificates/audit.zip", query_string={"date_from": day, "date_to": day})
    assert resp.mimetype == "application/zip"
    with zipfile.ZipFile(io.BytesIO(resp.data)) as zf:
        rows = list(csv.DictReader(io.StringIO(zf.read("index.csv").decode())))
        assert cert.number in {r["number"] for r in rows}
        assert set(zf.namelist()) == {"index.csv", *(r["file_name"] for r in rows)}
    missing = client.get("/certificates/audit.zip", query_string={"date_from": day})
    assert missing.status_code == 422


def test_rotor_history_pdf_link_works(client, login_as, ready) -> None:
    login_as("owner")
    resp = client.get(f"/rotors/{ready.rotor_id}/history.pdf")
    assert resp.mimetype == "application/pdf" and resp.data.startswith(b"%PDF")
    resp = client.get(f"/rotor-types/{ready.rotor.rotor_type_id}/history.pdf")
    assert resp.mimetype == "application/pdf"
    assert client.get("/rotors/999999/history.pdf").status_code == 404


def test_job_page_offers_issue_then_shows_the_certificate(client, login_as, ready, db) -> None:
    login_as("quality")
    page = client.get(f"/jobs/{ready.id}").get_data(as_text=True)
    assert f'action="/certificates/issue/{ready.id}"' in page
    _issue(client, ready)
    cert = db.query(Certificate).filter_by(job_id=ready.id).one()
    page = client.get(f"/jobs/{ready.id}").get_data(as_text=True)
    assert f"{cert.number} revision 1" in page
    assert f'action="/certificates/issue/{ready.id}"' not in page


def test_rotor_page_links_the_history_pdfs(client, login_as, ready) -> None:
    login_as("operator")
    page = client.get(f"/rotors/{ready.rotor_id}").get_data(as_text=True)
    assert f"/rotors/{ready.rotor_id}/history.pdf" in page
    assert f"/rotor-types/{ready.rotor.rotor_type_id}/history.pdf" in page
