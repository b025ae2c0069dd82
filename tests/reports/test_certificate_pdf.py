"""The certificate PDF from a hand-built CertificateData: content, hash, reproducible bytes."""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
import re

import pypdf

from shopapp.reports import certificate as report
from shopapp.reports.common import pdf_text
from tests.reports.samples import certificate_data


def _text(pdf: bytes) -> str:
    reader = pypdf.PdfReader(io.BytesIO(pdf))
    return "\n".join(page.extract_text() for page in reader.pages)


def test_pdf_states_number_serial_limits_residuals_verdict_and_hash() -> None:
    data = certificate_data()
    pdf = report.render(data)
    text = _text(pdf)
    for words in ("BC-2026-00017 revision 1", "SN-4471", "Harbourside Air Handling Ltd",
                  "PO-88412", "FAN-710", "ISO 21940-11 balance grade G 6.3", "WITHIN",
                  "TOLERANCE", "Bay 2 hard-bearing", "last verified 2026-03-10: passed",
                  "600 rpm", "Ola Operator", "Quinn Quality", "shopapp report verify",
                  "/verify", "not a vibration acceptance", "local codes"):
        assert words in text, words
    # Limits and residuals as printed (4 significant figures of the stored values).
    assert re.search(r"bearing A\s+700\s+2439\s+29 %\s+within", text)
    assert re.search(r"bearing B\s+420\s+2439\s+17 %\s+within", text)
    assert "split: 12.0 g at position 1 (0°)" in text
    assert report.data_sha256(data) in text.replace("\n", "")


def test_page_x_of_y_on_every_page() -> None:
    reader = pypdf.PdfReader(io.BytesIO(report.render(certificate_data())))
    total = len(reader.pages)
    for number, page in enumerate(reader.pages, start=1):
        assert f"page {number} of {total}" in page.extract_text()


def test_rendering_twice_gives_the_same_bytes() -> None:
    data = certificate_data()
    first, second = report.render(data), report.render(data)
    assert hashlib.sha256(first).hexdigest() == hashlib.sha256(second).hexdigest()


def test_stored_json_renders_the_same_pdf() -> None:
    data = report.normalized(certificate_data(u_per_gmm=4877.7181234567))
    stored = report.canonical_json(data)
    again = report.CertificateData.from_json(stored)
    assert report.render(again) == report.render(data)
    assert report.canonical_json(again) == stored


def test_creation_date_and_id_come_from_the_data_not_the_clock(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    data = certificate_data()
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1234567890")  # reportlab would use this
    reader = pypdf.PdfReader(io.BytesIO(report.render(data)))
    assert reader.metadata["/CreationDate"] == "D:20261105143000+00'00'"
    monkeypatch.delenv("SOURCE_DATE_EPOCH")
    assert report.render(data) == report.render(data)
    other = report.render(dataclasses.replace(data, customer_order_ref="PO-88413"))
    ids = [pypdf.PdfReader(io.BytesIO(p)).trailer["/ID"][0] for p in (report.render(data), other)]
    assert ids[0] != ids[1]


def test_canonical_json_is_sorted_compact_and_rounded() -> None:
    data = certificate_data(u_per_gmm=4877.7181234567, mass_kg=-0.0 + 120.0)
    text = report.canonical_json(data)
    obj = json.loads(text)
    assert obj["u_per_gmm"] == 4877.72  # 6 significant digits
    assert text == json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert "g·mm" in text  # ensure_ascii=False keeps the unit readable
    assert report.data_sha256(data) == hashlib.sha256(text.encode("utf-8")).hexdigest()


def test_any_changed_value_changes_the_content_hash() -> None:
    data = certificate_data()
    assert report.data_sha256(data) != report.data_sha256(
        dataclasses.replace(data, serial_number="SN-4472"))


def test_machine_without_records_says_so() -> None:
    data = certificate_data(machine_verified_on=None,
                            machine_verification="no verification on file")
    assert "no verification on file" in _text(report.render(data))


def test_shop_unit_other_than_gmm_shows_both_units() -> None:
    data = certificate_data(unit="oz·in", limits=(
        report.LimitLine("plane 1", 1829.0, 2.54, 600.0, 0.833, 32.8, True, True),
    ), planes=1, residual=(report.PlaneVector(1, 600.0, 0.833, 75.0),),
        initial=(report.PlaneVector(1, 9000.0, 12.5, 30.0),), plot_limits_shop=(2.54,),
        radius_2_mm=None, plane_2_mm=None, corrections=())
    text = _text(report.render(data))
    assert "Limit (oz·in)" in text and "Limit (g·mm)" in text
    assert "single plane" in text
    assert "none: the rotor was within tolerance as received" in text


def test_pdf_text_replaces_what_the_standard_fonts_cannot_show() -> None:
    assert pdf_text("U ≤ U_per − 1 Ω") == "U <= U_per - 1 Omega"
    assert pdf_text("g·mm 30° µm Ø10") == "g·mm 30° µm Ø10"
    assert pdf_text("漢") == "?"


def test_first_lines_are_what_verify_shows() -> None:
    lines = dict(report.first_lines(certificate_data()))
    assert lines["Certificate"] == "BC-2026-00017 revision 1"
    assert lines["Serial number"] == "SN-4471"
    # ISO 21940-11 judges in the bearing planes: the result names them (issue 11, one basis).
    assert lines["Result"] == "within tolerance in both bearing planes"


def test_reportlab_finds_its_c_accelerator() -> None:
    # rl-accel is a dependency (issue 13); without it reportlab quietly measures and
    # formats every string in Python, about a third slower per certificate.
    from reportlab.lib import rl_accel

    assert rl_accel._py_funcs == {}, sorted(rl_accel._py_funcs)
