"""Papers that travel with the rotor: the job traveller and the rotor tag.

- The **job traveller** (A4, one page) is printed at book-in and goes with the
  rotor through the shop: the job number as text and as a QR code (scanning opens
  the job page), what is to be balanced and against what, the safety notes, and
  empty boxes for the readings and corrections written by hand at the machine.
- The **rotor tag** is a small label (62 × 29 mm unless the shop sets another
  size) fixed to the balanced rotor: serial, job, the result ("balanced to G 6.3",
  date) and a QR code.

Both are drawn from plain dataclasses (no database); both are reproducible (the
creation date printed in the PDF is ``printed_on``).
"""

from __future__ import annotations

import datetime as dt
import hashlib
from dataclasses import dataclass
from io import BytesIO

from reportlab.graphics import renderPDF
from reportlab.lib.units import mm
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import Flowable, KeepInFrame, Paragraph, Spacer, Table, TableStyle

from shopapp.core import display
from shopapp.reports.common import (
    FONT,
    FONT_BOLD,
    HEADER_GAP,
    INK,
    MARGIN,
    PAGE_SIZE,
    RULE,
    SHADE,
    DocumentMeta,
    build_pdf,
    esc,
    grid_table,
    pdf_text,
    styles,
)
from shopapp.reports.qr import qr_drawing

READING_ROWS = 8
CORRECTION_ROWS = 4
TAG_MIN_MM = (40.0, 20.0)
TAG_MAX_MM = (150.0, 100.0)
_CONTENT_WIDTH = PAGE_SIZE[0] - 2 * MARGIN
# The page frame of common.build_pdf (its margins, 6 pt frame padding top and bottom).
_FRAME_HEIGHT = PAGE_SIZE[1] - 2 * MARGIN - 2 * HEADER_GAP + 10 * mm - 12


@dataclass(frozen=True)
class TravellerData:
    """What the job traveller prints (all text already in the shop's words and units)."""

    shop_name: str
    job_number: str
    job_url: str  # what the QR code holds; a bare path (no BASE_URL) prints without a QR code
    customer_name: str
    customer_order_ref: str
    rotor_part_number: str
    rotor_description: str
    serial_number: str
    mass_kg: float
    planes: int
    tolerance: str
    plane_limits: tuple[str, ...]  # per correction plane, "plane 1: 1220 g·mm"
    balancing_speed_rpm: float
    service_speed_rpm: float
    machine: str
    received_on: str
    promised_on: str  # "" when no date was promised
    safety_notes: tuple[str, ...]
    job_notes: str
    printed_on: str  # ISO date


@dataclass(frozen=True)
class TagData:
    """What the rotor tag prints."""

    shop_name: str
    serial_number: str
    job_number: str
    result: str  # "balanced to G 6.3"
    balanced_on: str  # ISO date; "" leaves a line to write the date on
    certificate: str  # "BC-2026-00017 rev 1"; "" when none yet
    qr_text: str  # a whole URL, or "" for no QR code
    qr_caption: str  # what scanning it opens
    width_mm: float
    height_mm: float
    printed_on: str


def has_qr(url: str) -> bool:
    return url.startswith(("https://", "http://"))


# --------------------------------------------------------------------------- traveller


def _head(data: TravellerData) -> Flowable:
    st = styles()
    left: list[Flowable] = [
        Paragraph(esc(data.shop_name), st.subtitle),
        Paragraph(esc("Job traveller"), st.title),
        Paragraph(f'<font name="{FONT_BOLD}" size="22">{esc(data.job_number)}</font>', st.body),
        Spacer(1, 8 * mm),
        Paragraph(esc(f"Job page: {data.job_url}"), st.small),
    ]
    size = 34 * mm
    right: Flowable = (qr_drawing(data.job_url, size) if has_qr(data.job_url)
                       else Paragraph(esc("no QR code: the shop's BASE_URL is not set"),
                                      st.small))
    table = Table([[left, right]], colWidths=[_CONTENT_WIDTH - size - 2 * mm, size + 2 * mm])
    table.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"),
                               ("LEFTPADDING", (0, 0), (-1, -1), 0),
                               ("RIGHTPADDING", (0, 0), (-1, -1), 0)]))
    return table


def _what(data: TravellerData) -> list[Flowable]:
    st = styles()
    w = _CONTENT_WIDTH
    rotor = f"{data.rotor_part_number} {data.rotor_description}".strip()
    limits = "; ".join(data.plane_limits) if data.plane_limits else "–"
    rows = [
        ["Customer", data.customer_name, "Order", data.customer_order_ref or "–"],
        ["Rotor", rotor, "Serial", data.serial_number],
        ["Mass", display.quantity(data.mass_kg, "kg"), "Planes", str(data.planes)],
        ["Tolerance", data.tolerance, "Limits", limits],
        ["Balancing speed", display.quantity(data.balancing_speed_rpm, "rpm"),
         "Service speed", display.quantity(data.service_speed_rpm, "rpm")],
        ["Machine", data.machine, "Received", data.received_on],
        ["Promised", data.promised_on or "no date promised", "Printed", data.printed_on],
    ]
    table = grid_table(rows, [w * 0.16, w * 0.38, w * 0.14, w * 0.32], header_rows=0,
                       label_column=True)
    table.setStyle(TableStyle([("BACKGROUND", (2, 0), (2, -1), SHADE)]))
    return [Paragraph("The job", st.heading), table]


def _safety(data: TravellerData) -> list[Flowable]:
    st = styles()
    out: list[Flowable] = [Paragraph("Safety", st.heading)]
    if data.safety_notes:
        out.append(Paragraph("<br/>".join(esc(f"• {n}") for n in data.safety_notes),
                             st.caution))
    if data.job_notes.strip():
        out.append(Paragraph(esc(f"Job notes: {data.job_notes.strip()}"), st.body))
    return out


def _boxes(data: TravellerData) -> list[Flowable]:
    st = styles()
    w = _CONTENT_WIDTH
    plane_heads: list[str] = []
    for p in range(1, data.planes + 1):
        plane_heads += [f"Plane {p} amplitude", f"Plane {p} angle"]
    heads = ["Run", "Purpose", "Speed (rpm)", *plane_heads, "Initials"]
    fractions = [0.07, 0.15, 0.12, *([0.56 / len(plane_heads)] * len(plane_heads)), 0.10]
    readings = grid_table([heads, *[[str(i), " ", " ", *[" "] * len(plane_heads), " "]
                                     for i in range(1, READING_ROWS + 1)]],
                          [w * f for f in fractions])
    readings.setStyle(TableStyle([("BOTTOMPADDING", (0, 1), (-1, -1), 7)]))
    corrections = grid_table(
        [["Plane", "Add / remove", "Mass (g)", "Angle (°)", "Radius (mm)", "How fitted",
          "Initials"], *[[" "] * 7 for _ in range(CORRECTION_ROWS)]],
        [w * f for f in (0.08, 0.13, 0.12, 0.11, 0.12, 0.34, 0.10)],
    )
    corrections.setStyle(TableStyle([("BOTTOMPADDING", (0, 1), (-1, -1), 15)]))
    sign = grid_table([["", "Name", "Date", "Signature"],
                       ["Balanced by", " ", " ", " "], ["Checked by", " ", " ", " "]],
                      [w * 0.2, w * 0.35, w * 0.15, w * 0.3], label_column=True)
    sign.setStyle(TableStyle([("BOTTOMPADDING", (0, 1), (-1, -1), 14)]))
    return [
        Paragraph("Readings (write them here, enter them in shopapp)", st.heading), readings,
        Paragraph("Corrections fitted", st.heading), corrections,
        Paragraph("Sign-off", st.heading), sign,
    ]


def render_traveller(data: TravellerData) -> bytes:
    """The job traveller as a one-page A4 PDF (reproducible). Long safety notes shrink the
    page's content to fit rather than spill onto a second sheet."""
    content: list[Flowable] = [_head(data), *_what(data), *_safety(data), *_boxes(data)]
    story: list[Flowable] = [KeepInFrame(_CONTENT_WIDTH, _FRAME_HEIGHT, content,
                                         mode="shrink")]
    created = dt.datetime.fromisoformat(data.printed_on).replace(tzinfo=dt.UTC)
    meta = DocumentMeta(
        title=f"Job traveller {data.job_number}", created=created,
        id_seed=hashlib.sha256(repr(data).encode("utf-8")).hexdigest(),
        author=data.shop_name, subject=f"job {data.job_number}; serial {data.serial_number}",
        header_left=f"{data.shop_name} · job traveller",
        header_right=f"job {data.job_number} · serial {data.serial_number}",
        footer_left="goes with the rotor until it is dispatched",
    )
    return build_pdf(story, meta)


# --------------------------------------------------------------------------- rotor tag


def _fit(text: str, font: str, size: float, width: float) -> float:
    """The largest font size up to ``size`` at which ``text`` fits ``width`` (down to 4 pt)."""
    w = stringWidth(pdf_text(text), font, size)
    return size if w <= width else max(4.0, size * width / w)


def render_tag(data: TagData) -> bytes:
    """The rotor tag: one label-sized page (reproducible). QR on the left, text on the right."""
    width, height = data.width_mm * mm, data.height_mm * mm
    buf = BytesIO()
    canvas = Canvas(buf, pagesize=(width, height), invariant=1)
    canvas.setTitle(pdf_text(f"Rotor tag {data.serial_number} (job {data.job_number})"))
    canvas.setAuthor(pdf_text(data.shop_name))
    canvas.setCreator("shopapp")
    created = dt.datetime.fromisoformat(data.printed_on).replace(tzinfo=dt.UTC)
    canvas.setDateFormatter(lambda *_ymdhms: created.strftime("D:%Y%m%d%H%M%S+00'00'"))
    pad = 1.5 * mm
    x = pad
    if data.qr_text:
        size = height - 2 * pad
        renderPDF.draw(qr_drawing(data.qr_text, size), canvas, pad, pad)
        x = pad + size + 1 * mm
    room = width - x - pad
    lines = [
        (FONT_BOLD, 9.0, data.serial_number),
        (FONT, 6.5, f"job {data.job_number}"),
        (FONT_BOLD, 7.5, data.result),
        (FONT, 6.5, f"date {data.balanced_on}" if data.balanced_on else "date ____________"),
        (FONT, 5.5, data.certificate),
        (FONT, 5.0, data.qr_caption if data.qr_text else ""),
    ]
    sizes = [(_fit(t, f, s, room) if t else 0.0) for f, s, t in lines]
    total = sum(s * 1.18 for s in sizes)
    scale = min(1.0, (height - 2 * pad) / total) if total else 1.0
    y = height - pad
    canvas.setFillColor(INK)
    for (font, _size, text), fitted in zip(lines, sizes, strict=True):
        if not text:
            continue
        size = fitted * scale
        y -= size * 1.18
        canvas.setFont(font, size)
        canvas.drawString(x, y + size * 0.18, pdf_text(text))
    canvas.setStrokeColor(RULE)
    canvas.setLineWidth(0.3)
    canvas.rect(0.4, 0.4, width - 0.8, height - 0.8)  # the cut line
    canvas.showPage()
    canvas.save()
    return buf.getvalue()


def parse_tag_size(text: str) -> tuple[float, float]:
    """``"62x29"`` (mm, width × height) → (62.0, 29.0); ValueError naming the reason."""
    parts = str(text).lower().replace("×", "x").replace("mm", "").split("x")
    if len(parts) != 2:
        raise ValueError(f"{text!r} is not a label size such as 62x29 (width x height in mm)")
    try:
        w, h = (float(p.strip()) for p in parts)
    except ValueError:
        raise ValueError(f"{text!r} is not a label size such as 62x29 (width x height in mm)"
                         ) from None
    if not (TAG_MIN_MM[0] <= w <= TAG_MAX_MM[0] and TAG_MIN_MM[1] <= h <= TAG_MAX_MM[1]):
        raise ValueError(f"a rotor tag of {display.plain(w)} x {display.plain(h)} mm is "
                         f"outside {display.plain(TAG_MIN_MM[0])}-{display.plain(TAG_MAX_MM[0])}"
                         f" x {display.plain(TAG_MIN_MM[1])}-{display.plain(TAG_MAX_MM[1])} mm")
    return w, h
