"""The certificate drawn straight onto the canvas (shopapp.reports.sheet): wrapping, margins,
page breaks and content, read back from the PDF with pypdf (not with our own code)."""

from __future__ import annotations

import io
import re
from typing import Any

import pypdf
import pypdfium2
import pytest
from reportlab.lib.utils import simpleSplit
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.pdfgen.canvas import Canvas

from shopapp.reports import certificate as report
from shopapp.reports.common import MARGIN, PAGE_SIZE, STYLES, text_width
from shopapp.reports.sheet import Page, wrap
from tests.reports.samples import certificate_data

Run = tuple[str, float, float, float, str]  # font, size, x, y, text


def _runs(pdf: bytes) -> list[list[Run]]:
    """Every text run of every page with its font, size and baseline start, as pypdf reads it."""
    pages = []
    for page in pypdf.PdfReader(io.BytesIO(pdf)).pages:
        runs: list[Run] = []

        def visit(text: str, cm: Any, tm: Any, font: Any, size: float,
                  runs: list[Run] = runs) -> None:
            if text.strip():
                m = pypdf.mult(tm, cm)
                runs.append((str(font["/BaseFont"])[1:], size * m[3], m[4], m[5],
                             text.strip("\n")))

        page.extract_text(visitor_text=visit)
        pages.append(runs)
    return pages


def _text(pdf: bytes) -> str:
    return "\n".join(p.extract_text() for p in pypdf.PdfReader(io.BytesIO(pdf)).pages)


def _squeezed(text: str) -> str:
    return "".join(text.split())


def _page_pixels(draw: Any) -> tuple[bytes, str]:
    """Pixels (pdfium) and text (pypdf) of a one-page PDF drawn by ``draw(canvas)``."""
    buf = io.BytesIO()
    canvas = Canvas(buf, pagesize=PAGE_SIZE, invariant=1)
    draw(canvas)
    canvas.showPage()
    canvas.save()
    page = pypdfium2.PdfDocument(buf.getvalue())[0]
    return page.render(scale=2).to_pil().tobytes(), _text(buf.getvalue()).strip()


def test_page_lines_draw_what_reportlabs_draw_string_draws() -> None:
    # Page.write writes the text operators itself; reportlab's drawString is the reference.
    chars = "".join(wrap(bytes(range(32, 256)).decode("cp1252", "ignore"), "Helvetica", 9,
                         10_000))
    lines = [(STYLES.heading, "1  Rotor (a) \\ b"), (STYLES.cell, "2439 g·mm at 30°"),
             (STYLES.small, "“quoted” – dash, Ø10, µm, ½"), (STYLES.mono, "0" * 64),
             (STYLES.cell_bold, "Balanced by (operator)"), (STYLES.body, chars[:90]),
             (STYLES.body, chars[90:])]

    def ours(canvas: Canvas) -> None:
        page = Page(canvas, {})
        for k, (st, line) in enumerate(lines):
            page.write(st, 40.123456 + 1.37 * k, 780.98765 - 30 * k, line)
        page.finish()

    def reportlabs(canvas: Canvas) -> None:
        for k, (st, line) in enumerate(lines):
            canvas.setFont(st.fontName, st.fontSize)
            canvas.setFillColor(st.textColor)
            canvas.drawString(40.123456 + 1.37 * k, 780.98765 - 30 * k, line)

    pixels, text = _page_pixels(ours)
    assert pixels == _page_pixels(reportlabs)[0]
    # pypdf reads back exactly the lines (reportlab's own writes the bullet as 0x7f, which
    # pypdf reads as a control character; ours as Windows-1252's 0x95, the same glyph)
    assert text == "\n".join(line for _st, line in lines)


def test_control_characters_print_as_question_marks() -> None:
    assert wrap("a\x07b\tc\x00", "Helvetica", 9, 100.0) == ["a?b c?"]


def test_text_width_is_reportlabs_string_width() -> None:
    # reportlab's stringWidth is the reference, on every Windows-1252 character.
    chars = bytes(range(256)).decode("cp1252", "ignore")
    texts = [chars, "Correction radius, plane 1", "g·mm 30° µm Ø10 – “q”", "", "\x07 tab\t"]
    texts += [chars[k::7] * 3 for k in range(7)]
    for font in ("Helvetica", "Helvetica-Bold", "Courier"):
        for size in (7.5, 8, 8.5, 9, 10.5, 12, 16):
            for t in texts:
                assert text_width(t, font, size) == pytest.approx(
                    stringWidth(t, font, size), rel=1e-12, abs=1e-12), (font, size, t)


@pytest.mark.parametrize("text", [
    report.COVERAGE_STATEMENT, report.CAUTION,
    "Harbourside   Air Handling Ltd,  plant 7, rooftop units " * 3,
])
def test_wrap_breaks_where_reportlabs_simple_split_breaks(text: str) -> None:
    # reportlab's own greedy word wrap is the reference; our lines must be the same.
    for font, size, width in (("Helvetica", 9, 300.0), ("Helvetica-Bold", 8.5, 120.0),
                              ("Courier", 8, 200.0)):
        expected = simpleSplit(" ".join(text.split()), font, size, width)
        assert wrap(text, font, size, width) == expected


def test_wrap_cuts_a_word_wider_than_the_line_and_loses_nothing() -> None:
    word = "SN-" + "7" * 150
    url = "https://certs.example.test/verify?n=BC-2026-00017&c=" + "K" * 90
    for text in (word, f"serial {word} on {url} end"):
        lines = wrap(text, "Helvetica", 9, 100.0)
        assert len(lines) > 3
        assert all(stringWidth(line, "Helvetica", 9) <= 100.0 for line in lines)
        assert "".join(lines).replace(" ", "") == _squeezed(text)
    assert wrap("   ", "Helvetica", 9, 100.0) == []


HOSTILE = {
    "shop_name": "Northgate Rotor Works and Precision Balancing Services of the Eastfield "
                 "Quarry Lane Industrial Estate",
    "customer_name": "Harbourside Air Handling, Cooling, Heating and Ventilation Systems "
                     "Limited, Facilities Management Division, Building 12",
    "serial_number": "SN-" + "4471" * 20,
    "revision": 3,
    "revision_reason": "the customer asked for the order reference of their second "
                       "purchase order, " * 4,
    "notes": ("The rotor arrived with a cracked balance ring on side B; it was replaced "
              "by the customer before balancing and the new ring was drilled. " * 5,),
}


def test_long_texts_wrap_inside_the_margins() -> None:
    data = certificate_data(**HOSTILE)
    pdf = report.render(data)
    width, height = PAGE_SIZE
    for page in _runs(pdf):
        for font, size, x, y, text in page:
            right = x + stringWidth(text, font, size)
            assert x >= MARGIN - 0.01 and right <= width - MARGIN + 0.01, (text, x, right)
            assert 0 < y < height, text
    squeezed = _squeezed(_text(pdf))
    for key in ("customer_name", "revision_reason", "notes"):
        value = HOSTILE[key]
        assert _squeezed(value if isinstance(value, str) else value[0]) in squeezed, key
    # the serial number is cut, not lost: all of its characters in order
    assert _squeezed(str(HOSTILE["serial_number"])) in squeezed
    # the running header and footer: texts on one line do not overlap (the header's shop
    # name and serial number are cut short with "…"; the body states them in full)
    for page in _runs(pdf):
        running = [r for r in page if r[3] < MARGIN or r[3] > height - MARGIN]
        assert len(running) == 4  # header left and right, footer left and page number
        for font, size, x, y, text in running:
            for _font, _size, x2, y2, text2 in running:
                if y2 == y and x < x2:
                    assert x + stringWidth(text, font, size) < x2, (text, text2)


def test_a_table_longer_than_a_page_breaks_between_rows_and_repeats_its_head() -> None:
    many = tuple(report.CorrectionLine(1 + k % 2, "add", 1.0 + k, (7 * k) % 360, 300.0,
                                       f"drilled hole {k + 1}") for k in range(90))
    pdf = report.render(certificate_data(corrections=many))
    pages = [p.extract_text() for p in pypdf.PdfReader(io.BytesIO(pdf)).pages]
    found = [int(n) for p in pages for n in re.findall(r"drilled hole (\d+)", p)]
    assert found == list(range(1, 91))  # every row once, in order
    with_rows = [p for p in pages if "drilled hole" in p]
    assert len(with_rows) >= 2
    for p in with_rows:
        assert re.search(r"Plane\s+Action\s+Mass\s+Angle\s+Radius\s+How", p)
    # nothing written over the running footer: body text stays above its rule
    bottom_rule = MARGIN - 6 * 72 / 25.4 + 3.5 * 72 / 25.4
    for page in _runs(pdf):
        for _font, _size, _x, y, text in page:
            if not (text.startswith("content hash") or text.startswith("page ")):
                assert y > bottom_rule, text


def test_the_sections_come_in_their_order_with_the_signature_fields() -> None:
    data = certificate_data(schema=2, verification_code="K7QX-4M2P",
                            verify_url="https://certs.example.test/verify?n=BC-2026-00017"
                                       "&c=K7QX-4M2P")
    text = " ".join(_text(report.render(data)).split())
    order = ["Balance certificate", "Certificate BC-2026-00017 revision 1", "Customer",
             "WITHIN TOLERANCE", "1 Rotor", "2 Tolerance", "3 How it was balanced",
             "Initial unbalance (run 1)", "Corrections applied", "4 Result (run 4)",
             "Polar plot per correction plane", "5 What this certificate covers",
             "Caution:", "6 Signed", "Balanced by (operator) Ola Operator 2026-11-04",
             "Issued by (quality) Quinn Quality 2026-11-05",
             "7 Check that this document is genuine",
             "https://certs.example.test/verify?n=BC-2026-00017&c=K7QX-4M2P",
             "verification code K7QX-4M2P", report.data_sha256(data)]
    at = 0
    for words in order:  # each after the one before
        found = text.find(words, at)
        assert found >= 0, (words, text[at:at + 200])
        at = found + len(words)


@pytest.mark.parametrize("shop_name", ["Northgate Rotor Works – “Ø10” µm", "Bell\x07 Works"])
def test_running_header_and_footer_draw_what_reportlabs_draw_string_draws(
        shop_name: str, monkeypatch: pytest.MonkeyPatch) -> None:
    # The header and footer write their text operators themselves; with none of them
    # written that way (every text through reportlab's drawString) the pages are the same.
    from shopapp.reports import common

    data = certificate_data(shop_name=shop_name)

    def pixels() -> list[bytes]:
        pdf = pypdfium2.PdfDocument(report.render(data))
        return [page.render(scale=2).to_pil().tobytes() for page in pdf]

    ours = pixels()
    monkeypatch.setattr(common, "_SHOWN", frozenset())
    assert ours == pixels()
