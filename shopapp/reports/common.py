"""What every shopapp PDF shares: fonts, paragraph styles, header and footer with
"page x of y", table styling, and reproducible bytes.

A document is a list of platypus flowables plus a :class:`DocumentMeta`;
:func:`build_pdf` turns them into bytes (the certificate is drawn without platypus, on a
:func:`document_canvas`, by :mod:`shopapp.reports.sheet`). Two builds of the same flowables and
meta give the same bytes: reportlab's invariant mode is on, the creation date
printed into the PDF comes from ``meta.created`` and the document ID is an MD5
of ``meta.id_seed`` (not of the wall clock), so a stored certificate can be
re-rendered and checked against its stored SHA-256.

Only the 14 standard PDF fonts are used (nothing embedded, nothing that varies
between machines). They cover the Windows-1252 characters; :func:`pdf_text`
replaces the few symbols outside it that our texts use.
"""

from __future__ import annotations

import datetime as dt
import functools
import hashlib
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from io import BytesIO
from typing import Any

from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT, TA_RIGHT
from reportlab.lib.pagesizes import A4
from reportlab.lib.rl_accel import escapePDF, fp_str
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import Flowable, Paragraph, SimpleDocTemplate, Table, TableStyle
from reportlab.platypus.flowables import KeepTogether

FONT = "Helvetica"
FONT_BOLD = "Helvetica-Bold"
FONT_ITALIC = "Helvetica-Oblique"
FONT_MONO = "Courier"

INK = colors.HexColor("#1d232a")
MUTED = colors.HexColor("#5b6570")
RULE = colors.HexColor("#b9c1c9")
SHADE = colors.HexColor("#eef1f4")

PAGE_SIZE = A4
MARGIN = 18 * mm
HEADER_GAP = 10 * mm  # space the running header and footer take inside the margins
# Where a page's body may go: below BODY_TOP from the page's top edge, above BODY_BOTTOM from
# its bottom edge (the platypus frame of build_pdf, its 6 pt padding included).
BODY_TOP = MARGIN + HEADER_GAP - 4 * mm + 6
BODY_BOTTOM = MARGIN + HEADER_GAP - 6 * mm + 6

# Symbols our texts use that the standard fonts (Windows-1252) cannot show.
_REPLACEMENTS = {
    "≤": "<=",
    "≥": ">=",
    "−": "-",
    "Ω": "Omega",
    "√": "sqrt",
    "→": "->",
    "≈": "~",
    "⌀": "Ø",
    "\u2009": " ",
    "\u202f": " ",
}


# str.translate table of the replacements: one pass in C instead of a loop per character.
_TRANSLATION = str.maketrans(_REPLACEMENTS)


def pdf_text(text: str) -> str:
    """``text`` made printable with the standard fonts (Windows-1252), no silent boxes."""
    s = text.translate(_TRANSLATION)
    if s.isascii():  # nearly every text: nothing left to check
        return s
    # What Windows-1252 cannot encode becomes "?" (one pass in C, not a loop per character).
    return s.encode("cp1252", "replace").decode("cp1252")


def esc(text: object) -> str:
    """Escape for a platypus Paragraph (its mini-markup) after :func:`pdf_text`."""
    s = pdf_text(str(text))
    return s.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


# Every character pdf_text lets through: Windows-1252, control characters included.
_CP1252 = bytes(range(256)).decode("cp1252", "ignore")
@functools.cache
def _glyph_widths(font: str) -> dict[str, int]:
    """The advance width of each Windows-1252 character in ``font``, in 1/1000 of its size
    (the standard fonts' widths are whole numbers of these units)."""
    return {ch: round(stringWidth(ch, font, 1000)) for ch in _CP1252}


def text_width(text: str, font: str, size: float) -> float:
    """Width of ``text`` (already through ``pdf_text``) in points, as reportlab's
    ``stringWidth`` gives it (the same sum, in the same order), without encoding the text
    on every call: that cost more than the rest of laying out a table cell."""
    return sum(map(_glyph_widths(font).__getitem__, text)) * 0.001 * size


@dataclass(frozen=True)
class Styles:
    """The paragraph styles of our documents."""

    title: ParagraphStyle
    subtitle: ParagraphStyle
    heading: ParagraphStyle
    body: ParagraphStyle
    small: ParagraphStyle
    cell: ParagraphStyle
    cell_bold: ParagraphStyle
    mono: ParagraphStyle
    caution: ParagraphStyle


def styles() -> Styles:
    """Fresh paragraph styles (fresh objects, so one document cannot change another's)."""
    base = ParagraphStyle("body", fontName=FONT, fontSize=9, leading=11.5, textColor=INK,
                          alignment=TA_LEFT)
    return Styles(
        title=ParagraphStyle("title", parent=base, fontName=FONT_BOLD, fontSize=16, leading=19,
                             spaceAfter=2),
        subtitle=ParagraphStyle("subtitle", parent=base, fontSize=10, leading=13,
                                textColor=MUTED, spaceAfter=6),
        heading=ParagraphStyle("heading", parent=base, fontName=FONT_BOLD, fontSize=10.5,
                               leading=13, spaceBefore=8, spaceAfter=3),
        body=base,
        small=ParagraphStyle("small", parent=base, fontSize=7.5, leading=9.5, textColor=MUTED),
        cell=ParagraphStyle("cell", parent=base, fontSize=8.5, leading=10.5),
        cell_bold=ParagraphStyle("cell_bold", parent=base, fontName=FONT_BOLD, fontSize=8.5,
                                 leading=10.5),
        mono=ParagraphStyle("mono", parent=base, fontName=FONT_MONO, fontSize=8, leading=10),
        caution=ParagraphStyle("caution", parent=base, fontSize=8.5, leading=11,
                               borderColor=INK, borderWidth=0.8, borderPadding=5,
                               spaceBefore=8, spaceAfter=8, backColor=SHADE),
    )


# Styles shared by every table cell and the certificate: a style per cell (the right-aligned
# ones were made anew for each number) cost more than the cell's text. Nothing changes them.
STYLES = styles()
_CELL_RIGHT = ParagraphStyle("cell_r", parent=STYLES.cell, alignment=TA_RIGHT)
_CELL_BOLD_RIGHT = ParagraphStyle("cell_bold_r", parent=STYLES.cell_bold,
                                  alignment=TA_RIGHT)


def cell(value: object, style: ParagraphStyle, width: float | None,
         padding: float = 6) -> str | Paragraph:
    """A table cell's content: the plain text when it fits on one line, else a Paragraph.

    A plain string is drawn by the table itself (the table's FONT and TEXTCOLOR must
    match ``style``) at the place a one-line paragraph would be, without the
    paragraph's parsing and line breaking. Text that needs wrapping, or whose spaces
    a paragraph would fold, stays a Paragraph. ``padding``: the cell's left plus right.
    """
    text = pdf_text(str(value))
    if (width is not None and text and text == " ".join(text.split())
            and stringWidth(text, style.fontName, style.fontSize) <= width - padding - 0.01):
        return text
    return Paragraph(esc(value), style)


def grid_table(
    rows: Sequence[Sequence[Any]],
    col_widths: Sequence[float] | None = None,
    *,
    header_rows: int = 1,
    label_column: bool = False,
    align_right_from: int | None = None,
) -> Table:
    """A ruled table: shaded header row(s), optional shaded first column, numbers right-aligned.

    Cells may be strings (drawn in the ``cell`` style, wrapped when they do not fit) or
    flowables.
    """
    st = STYLES
    widths = list(col_widths) if col_widths else None
    body: list[list[Any]] = []
    for r, row in enumerate(rows):
        cells: list[Any] = []
        for c, value in enumerate(row):
            if isinstance(value, Flowable):
                cells.append(value)
                continue
            bold = r < header_rows or (label_column and c == 0)
            right = align_right_from is not None and c >= align_right_from and r >= header_rows
            if right:
                style = _CELL_BOLD_RIGHT if bold else _CELL_RIGHT
            else:
                style = st.cell_bold if bold else st.cell
            cells.append(cell(value, style, widths[c] if widths else None))
        body.append(cells)
    table = Table(body, colWidths=widths, repeatRows=header_rows)
    commands: list[tuple[Any, ...]] = [
        ("GRID", (0, 0), (-1, -1), 0.4, RULE),
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("TOPPADDING", (0, 0), (-1, -1), 2),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 2),
        ("LEFTPADDING", (0, 0), (-1, -1), 3),
        ("RIGHTPADDING", (0, 0), (-1, -1), 3),
        # For the plain-string cells: the cell styles' font, leading, colour and alignment.
        ("FONT", (0, 0), (-1, -1), st.cell.fontName, st.cell.fontSize, st.cell.leading),
        ("TEXTCOLOR", (0, 0), (-1, -1), st.cell.textColor),
    ]
    bold_font = (st.cell_bold.fontName, st.cell_bold.fontSize, st.cell_bold.leading)
    if header_rows:
        commands.append(("BACKGROUND", (0, 0), (-1, header_rows - 1), SHADE))
        commands.append(("FONT", (0, 0), (-1, header_rows - 1), *bold_font))
    if label_column:
        commands.append(("BACKGROUND", (0, header_rows), (0, -1), SHADE))
        commands.append(("FONT", (0, header_rows), (0, -1), *bold_font))
    if align_right_from is not None:
        commands.append(("ALIGN", (align_right_from, header_rows), (-1, -1), "RIGHT"))
    table.setStyle(TableStyle(commands))
    return table


def keep(*flowables: Flowable) -> KeepTogether:
    """Keep a heading with what follows it."""
    return KeepTogether(list(flowables))


@dataclass(frozen=True)
class DocumentMeta:
    """What a document says about itself: PDF info, running header and footer.

    ``created`` is printed as the PDF creation date; ``id_seed`` (any text that
    identifies the content, e.g. its SHA-256) becomes the PDF document ID.
    """

    title: str
    created: dt.datetime
    id_seed: str
    author: str = ""
    subject: str = ""
    keywords: str = ""
    header_left: str = ""
    header_right: str = ""
    footer_left: str = ""


def pdf_date(moment: dt.datetime) -> str:
    """A PDF date string ``D:YYYYMMDDHHmmSS+00'00'`` in UTC (PDF 1.7, section 7.9.4)."""
    if moment.tzinfo is None:
        raise ValueError("created must be timezone-aware")
    u = moment.astimezone(dt.UTC)
    return u.strftime("D:%Y%m%d%H%M%S+00'00'")


def _canvas_class(meta: DocumentMeta) -> type[Canvas]:
    """A canvas that holds pages back until the end, so each footer can say "page x of y"."""
    created = pdf_date(meta.created)
    seed = meta.id_seed.encode("utf-8")

    class _Canvas(Canvas):
        def __init__(self, *args: Any, **kwargs: Any) -> None:
            kwargs["invariant"] = 1
            super().__init__(*args, **kwargs)
            # Creation date and ID come from the content, not the clock or the
            # environment (reportlab would otherwise hash its own time stamp).
            self.setDateFormatter(lambda *_ymdhms: created)
            self._doc.signature = hashlib.md5(b"shopapp " + seed, usedforsecurity=False)
            self._pages: list[dict[str, Any]] = []

        def showPage(self) -> None:  # reportlab's method name
            self._pages.append(dict(self.__dict__))
            self._startPage()

        def save(self) -> None:
            total = len(self._pages)
            for number, state in enumerate(self._pages, start=1):
                self.__dict__.update(state)
                _draw_running(self, meta, number, total)
                Canvas.showPage(self)
            Canvas.save(self)

    return _Canvas


def _fit(text: str, font: str, size: float, width: float) -> str:
    """``text`` cut short with "…" so it is no wider than ``width`` (unchanged when it fits)."""
    if text_width(text, font, size) <= width:
        return text
    cut = len(text)
    while cut > 0 and text_width(text[:cut] + "…", font, size) > width:
        cut -= 1
    return text[:cut].rstrip() + "…"


def _draw_running(canvas: Canvas, meta: DocumentMeta, number: int, total: int) -> None:
    """Header and footer of one page. Where a left and a right text would overlap (a long
    shop name or serial number) they are cut short with "…", 12 pt apart, the right one
    keeping at least half the line; the body states them in full. Widths by text_width
    (reportlab's stringWidth encoded each text again)."""
    width, height = canvas._pagesize
    line = width - 2 * MARGIN
    canvas.saveState()
    canvas.setStrokeColor(RULE)
    canvas.setLineWidth(0.5)
    top = height - MARGIN + 4 * mm
    bottom = MARGIN - 6 * mm
    canvas.line(MARGIN, top - 1.5 * mm, width - MARGIN, top - 1.5 * mm)
    canvas.line(MARGIN, bottom + 3.5 * mm, width - MARGIN, bottom + 3.5 * mm)
    left, right = pdf_text(meta.header_left), pdf_text(meta.header_right)
    right = _fit(right, FONT, 7.5, max(line - 12 - text_width(left, FONT, 7.5), line / 2))
    wr = text_width(right, FONT, 7.5)
    page = f"page {number} of {total}"
    wp = text_width(page, FONT_BOLD, 8)
    _show(canvas, [
        (FONT, 7.5, MUTED, MARGIN, top, _fit(left, FONT, 7.5, line - 12 - wr)),
        (FONT, 7.5, MUTED, width - MARGIN - wr, top, right),
        (FONT, 7.5, MUTED, MARGIN, bottom,
         _fit(pdf_text(meta.footer_left), FONT, 7.5, line - 12 - wp)),
        (FONT_BOLD, 8, INK, width - MARGIN - wp, bottom, page),
    ])
    canvas.restoreState()


# Characters a standard font shows as themselves: Windows-1252 without control characters
# (reportlab draws a control character with a substitution font's glyph).
_SHOWN = frozenset(ch for ch in _CP1252 if ch >= " " and ch != "\x7f")


def shown_as_is(text: str) -> bool:
    """Whether reportlab writes ``text`` in a standard font as its Windows-1252 bytes (no
    control character, nothing outside Windows-1252), so its text operators may be
    written directly (``escapePDF(text.encode("cp1252"))``)."""
    return _SHOWN.issuperset(text)


def _show(canvas: Canvas, texts: Sequence[tuple[str, float, colors.Color, float, float, str]]
          ) -> None:
    """Draw ``(font, size, colour, x, y, text)`` texts as ``drawString`` draws them, each in
    a text object of its own; those of characters in ``_SHOWN`` written as the operators
    drawString writes (its font lookup and encoding through its codec cost more than the
    rest of a page's header and footer), any other through drawString."""
    for font, size, colour, x, y, text in texts:
        if not shown_as_is(text):
            canvas.setFont(font, size)
            canvas.setFillColor(colour)
            canvas.drawString(x, y, text)
            continue
        name = canvas._doc.getInternalFontName(font)
        canvas.addLiteral(
            f"{fp_str(colour.red, colour.green, colour.blue)} rg BT {name} {fp_str(size)} Tf "
            f"{fp_str(1.2 * size)} TL 1 0 0 1 {fp_str(x, y)} Tm "
            f"({escapePDF(text.encode('cp1252'))}) Tj T* ET")


def document_canvas(meta: DocumentMeta, out: BytesIO,
                    pagesize: tuple[float, float] = PAGE_SIZE) -> Canvas:
    """A canvas for a document drawn without platypus: reproducible, with ``meta``'s PDF
    info, and the running header and footer ("page x of y") drawn on each page at save."""
    canvas = _canvas_class(meta)(out, pagesize=pagesize)
    canvas.setTitle(pdf_text(meta.title))
    canvas.setAuthor(pdf_text(meta.author))
    canvas.setSubject(pdf_text(meta.subject))
    canvas.setKeywords(pdf_text(meta.keywords))
    canvas.setCreator("shopapp")
    return canvas


def build_pdf(
    story: list[Flowable],
    meta: DocumentMeta,
    *,
    pagesize: tuple[float, float] = PAGE_SIZE,
    on_page: Callable[[Canvas, Any], None] | None = None,
) -> bytes:
    """Lay out ``story`` on A4 pages with our header and footer; return the PDF bytes.

    Deterministic: the same story and meta give the same bytes (see module docstring).
    """
    buf = BytesIO()
    doc = SimpleDocTemplate(
        buf,
        pagesize=pagesize,
        leftMargin=MARGIN,
        rightMargin=MARGIN,
        topMargin=MARGIN + HEADER_GAP - 4 * mm,
        bottomMargin=MARGIN + HEADER_GAP - 6 * mm,
        title=pdf_text(meta.title),
        author=pdf_text(meta.author),
        subject=pdf_text(meta.subject),
        keywords=pdf_text(meta.keywords),
        creator="shopapp",
        invariant=1,
    )

    def _page(canvas: Canvas, document: Any) -> None:
        if on_page is not None:
            on_page(canvas, document)

    doc.build(story, onFirstPage=_page, onLaterPages=_page, canvasmaker=_canvas_class(meta))
    return buf.getvalue()
