"""The QR codes on our PDFs decode to the address printed beside them.

The page is rasterised with pypdfium2 (PDFium, the PDF engine of Chromium) and the
code is read back with zxing-cpp (an independent barcode reader); the printed text is
extracted with pypdf. Nothing of reportlab's QR encoder is used to read it back.
"""

from __future__ import annotations

import io
import re

import pypdf
import pypdfium2 as pdfium
import pytest
import zxingcpp

from shopapp.reports import certificate as report
from shopapp.reports import job_papers
from tests.reports.samples import certificate_data

URL = "https://balancing.example.test/verify?n=BC-2026-00017&c=K7Q2MZX4PB"


def _decode(pdf: bytes, page_index: int = -1, scale: float = 300 / 72) -> list[str]:
    doc = pdfium.PdfDocument(pdf)
    try:
        page = doc[page_index % len(doc)]
        image = page.render(scale=scale).to_pil()
        page.close()
    finally:
        doc.close()
    return [r.text for r in zxingcpp.read_barcodes(image)
            if r.format == zxingcpp.BarcodeFormat.QRCode]


def _text(pdf: bytes) -> str:
    return "\n".join(p.extract_text() for p in pypdf.PdfReader(io.BytesIO(pdf)).pages)


def _schema2(**kw: object) -> report.CertificateData:
    values: dict[str, object] = {"schema": 2, "verification_code": "K7Q2MZX4PB",
                                 "verify_url": URL, "signed_by": "CN=Test, O=Test"}
    values.update(kw)
    return certificate_data(**values)


def test_certificate_qr_decodes_to_the_printed_url() -> None:
    pdf = report.render(_schema2())
    text = _text(pdf)
    printed = re.findall(r"https://\S+", text)
    assert printed == [URL]
    assert _decode(pdf) == [URL]
    assert "verification code K7Q2MZX4PB" in text.replace("\n", " ")


def test_no_base_url_prints_the_path_and_no_qr() -> None:
    path = "/verify?n=BC-2026-00017&c=K7Q2MZX4PB"
    pdf = report.render(_schema2(verify_url=path))
    assert path in _text(pdf)
    assert _decode(pdf) == []


def test_schema_1_data_draws_and_stores_as_before() -> None:
    old = certificate_data()  # schema 1, as every certificate before issue 15
    assert "verification_code" not in report.canonical_json(old)
    assert _decode(report.render(old)) == []
    assert "verify at /verify" in _text(report.render(old))


def _traveller(**kw: object) -> job_papers.TravellerData:
    values: dict[str, object] = dict(
        shop_name="Northgate Rotor Works", job_number="J2026-00042",
        job_url="https://balancing.example.test/jobs/42", customer_name="Harbourside Air",
        customer_order_ref="PO-88412", rotor_part_number="FAN-710",
        rotor_description="two-plane fan impeller", serial_number="SN-4471", mass_kg=120.0,
        planes=2, tolerance="ISO 21940-11 G 6.3", plane_limits=("plane 1: 2440 g·mm",),
        balancing_speed_rpm=600.0, service_speed_rpm=1480.0, machine="HB-2",
        received_on="2026-11-02", promised_on="2026-11-09",
        safety_notes=("Balance at 600 rpm; never above 1480 rpm.",), job_notes="",
        printed_on="2026-11-02")
    values.update(kw)
    return job_papers.TravellerData(**values)  # type: ignore[arg-type]


def test_traveller_qr_opens_the_job_page_printed_beside_it() -> None:
    from shopapp.balancing.dynamics import SPEED_CAUTION

    # A busy job: several long safety notes and job notes still make one page.
    data = _traveller(safety_notes=(
        "Balance at 600 rpm; never above 1480 rpm (the lower of the machine's limit and the "
        "rotor's service speed).", "First bending critical speed 4200 rpm.",
        SPEED_CAUTION, SPEED_CAUTION.upper(), "Rotor type notes: " + "heavy hub; " * 30),
        job_notes="Customer reports bearing seat damage on side B. " * 6)
    pdf = job_papers.render_traveller(data)
    assert len(pypdf.PdfReader(io.BytesIO(pdf)).pages) == 1
    text = _text(pdf)
    assert f"Job page: {data.job_url}" in text
    for value in ("J2026-00042", "Harbourside Air", "FAN-710", "SN-4471", "G 6.3", "600 rpm",
                  "HB-2", "2026-11-09", "never above 1480 rpm"):
        assert value in text
    assert _decode(pdf) == [data.job_url]
    assert job_papers.render_traveller(data) == pdf  # reproducible


def _tag(**kw: object) -> job_papers.TagData:
    values: dict[str, object] = dict(
        shop_name="Northgate Rotor Works", serial_number="SN-4471", job_number="J2026-00042",
        result="balanced to G 6.3", balanced_on="2026-11-05",
        certificate="certificate BC-2026-00017 rev 1", qr_text=URL,
        qr_caption="scan: certificate check", width_mm=62.0, height_mm=29.0,
        printed_on="2026-11-05")
    values.update(kw)
    return job_papers.TagData(**values)  # type: ignore[arg-type]


@pytest.mark.parametrize("size", [(62.0, 29.0), (100.0, 50.0)])
def test_rotor_tag_has_the_label_size_and_a_readable_qr(size: tuple[float, float]) -> None:
    pdf = job_papers.render_tag(_tag(width_mm=size[0], height_mm=size[1]))
    page = pypdf.PdfReader(io.BytesIO(pdf)).pages[0]
    mm = 72 / 25.4
    assert float(page.mediabox.width) == pytest.approx(size[0] * mm, abs=0.01)
    assert float(page.mediabox.height) == pytest.approx(size[1] * mm, abs=0.01)
    text = _text(pdf)
    for value in ("SN-4471", "J2026-00042", "balanced to G 6.3", "2026-11-05"):
        assert value in text
    # A label printer prints at 300 dpi; read it back at that resolution.
    assert _decode(pdf, 0, scale=300 / 72) == [URL]


@pytest.mark.parametrize("text, size", [("62x29", (62.0, 29.0)), ("100 × 50 mm", (100.0, 50.0))])
def test_tag_size_setting_is_read(text: str, size: tuple[float, float]) -> None:
    assert job_papers.parse_tag_size(text) == size


@pytest.mark.parametrize("text, why", [("62", "not a label size"), ("axb", "not a label size"),
                                       ("10x10", "outside"), ("nanxnan", "outside")])
def test_bad_tag_size_names_the_reason(text: str, why: str) -> None:
    with pytest.raises(ValueError, match=why):
        job_papers.parse_tag_size(text)
