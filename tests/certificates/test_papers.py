"""Job traveller and rotor tag through the web (issue 15).

The QR codes are read back with zxing-cpp from a pypdfium2 rendering
(``tests/reports/test_qr_codes.py``); page sizes with pypdf.
"""

from __future__ import annotations

import io

import pypdf
import pytest

from shopapp.certificates import issue as certificates
from tests.certificates.signed import BASE, issue_signed
from tests.reports.samples import job_ready_for_certificate
from tests.reports.test_qr_codes import _decode

MM = 72 / 25.4


def _text(pdf: bytes) -> str:
    return "\n".join(p.extract_text() for p in pypdf.PdfReader(io.BytesIO(pdf)).pages)


@pytest.fixture()
def booked(db, shop):  # type: ignore[no-untyped-def]
    """A job just booked in (no runs yet), with a promised date and notes."""
    import datetime as dt

    job = shop.job(notes="Customer reports a damaged bearing seat on side B",
                   promised_on=dt.date.today() + dt.timedelta(days=7))
    db.commit()
    return job


def test_the_job_panel_links_the_traveller(client, login_as, booked) -> None:
    login_as("operator")
    page = client.get(f"/jobs/{booked.id}").get_data(as_text=True)
    assert f"/jobs/{booked.id}/traveller.pdf" in page
    assert f"/jobs/{booked.id}/rotor-tag.pdf" not in page  # not balanced yet


def test_traveller_at_book_in(app, client, login_as, booked) -> None:
    app.config["BASE_URL"] = BASE + "/"
    login_as("operator")
    resp = client.get(f"/jobs/{booked.id}/traveller.pdf")
    assert resp.status_code == 200 and resp.mimetype == "application/pdf"
    pdf = resp.data
    assert len(pypdf.PdfReader(io.BytesIO(pdf)).pages) == 1
    text = _text(pdf)
    rt = booked.rotor.rotor_type
    for value in (booked.number, booked.customer.name, rt.part_number,
                  booked.rotor.serial_number, booked.promised_on.isoformat(),
                  "damaged bearing seat", "Readings"):
        assert value in text, value
    assert _decode(pdf) == [f"{BASE}/jobs/{booked.id}"]


def test_traveller_without_base_url_prints_the_path_and_no_qr(client, login_as, booked) -> None:
    login_as("owner")
    pdf = client.get(f"/jobs/{booked.id}/traveller.pdf").data
    assert f"Job page: /jobs/{booked.id}" in _text(pdf)
    assert _decode(pdf) == []


def test_rotor_tag_is_refused_before_the_job_is_in_tolerance(client, login_as, booked) -> None:
    login_as("operator")
    resp = client.get(f"/jobs/{booked.id}/rotor-tag.pdf")
    assert resp.status_code == 409
    assert "printed once the job is in tolerance" in resp.get_data(as_text=True)


def test_rotor_tag_of_a_certified_job_opens_its_certificate_check(
        app, client, login_as, db, shop, make_user) -> None:
    cert = issue_signed(app, db, shop, make_user("operator"), make_user("quality"))
    app.config["BASE_URL"] = BASE
    login_as("operator")
    job_page = client.get(f"/jobs/{cert.job_id}").get_data(as_text=True)
    assert f"/jobs/{cert.job_id}/rotor-tag.pdf" in job_page
    pdf = client.get(f"/jobs/{cert.job_id}/rotor-tag.pdf").data
    page = pypdf.PdfReader(io.BytesIO(pdf)).pages[0]
    assert float(page.mediabox.width) == pytest.approx(62 * MM, abs=0.01)
    assert float(page.mediabox.height) == pytest.approx(29 * MM, abs=0.01)
    data = certificates.certificate_data(cert)
    text = _text(pdf)
    for value in (data.serial_number, data.job_number, "balanced to G 6.3", data.balanced_on,
                  cert.number):
        assert value in text, value
    assert _decode(pdf, 0) == [data.verify_url]


def test_rotor_tag_size_comes_from_the_config(app, client, login_as, db, shop, make_user) -> None:
    job = job_ready_for_certificate(db, shop, make_user("operator"))  # in tolerance
    db.commit()
    app.config.update(BASE_URL=BASE, ROTOR_TAG_SIZE_MM="100x50")
    login_as("operator")
    pdf = client.get(f"/jobs/{job.id}/rotor-tag.pdf").data
    page = pypdf.PdfReader(io.BytesIO(pdf)).pages[0]
    assert float(page.mediabox.width) == pytest.approx(100 * MM, abs=0.01)
    assert _decode(pdf, 0) == [f"{BASE}/jobs/{job.id}"]  # no certificate yet: the job page
    app.config["ROTOR_TAG_SIZE_MM"] = "huge"
    resp = client.get(f"/jobs/{job.id}/rotor-tag.pdf")
    assert resp.status_code == 422
    assert "ROTOR_TAG_SIZE_MM" in resp.get_data(as_text=True)
