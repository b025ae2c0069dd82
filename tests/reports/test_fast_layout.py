"""The shortcuts that made certificates fast (issue 13) draw what reportlab's own layout draws.

Each shortcut is rendered beside reportlab's general way of drawing the same thing
(a Paragraph per cell, a ``Drawing`` shape tree through ``renderPDF``), both pages are
rasterised with pdfium, and the pixels must be the same. The certificate itself no longer
goes through platypus: its canvas layout is checked in ``test_sheet.py``.
"""

from __future__ import annotations

import datetime as dt
import io
import math
import random
from typing import Any

import pypdfium2
from reportlab.graphics.shapes import Circle as RLCircle
from reportlab.graphics.shapes import Drawing, Polygon, PolyLine, String
from reportlab.graphics.shapes import Line as RLLine
from reportlab.graphics.shapes import Rect as RLRect
from reportlab.lib.colors import HexColor
from reportlab.lib.enums import TA_RIGHT
from reportlab.lib.styles import ParagraphStyle
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import Flowable, Paragraph

from shopapp.charts.primitives import Circle, Figure, Line, Polyline, Rect, Text
from shopapp.charts.styles import style
from shopapp.reports import certificate as report
from shopapp.reports.common import (
    STYLES,
    DocumentMeta,
    build_pdf,
    esc,
    grid_table,
)
from shopapp.reports.drawing import FigureFlowable, _circle
from tests.reports.samples import certificate_data

META = DocumentMeta(title="t", created=dt.datetime(2026, 1, 2, tzinfo=dt.UTC), id_seed="t")


def _pixels(story: list[Flowable]) -> list[bytes]:
    pdf = pypdfium2.PdfDocument(io.BytesIO(build_pdf(story, META)))
    return [page.render(scale=3).to_pil().tobytes() for page in pdf]


ROWS = [
    ["Plane", "Residual (g·mm)", "Angle", "How"],
    ["plane 1", "600", "75°", "single mass"],
    ["plane 2", "12345.6", "310°", "split: 12.0 g at position 1 (0°), 11.6 g at position 2 "
                                   "(45°), drilled 3 holes of 6 mm & ground the rim <flat>"],
    ["plane 3", "0.00123", "5°", "two  spaces and a trailing one "],
]
WIDTHS = [60.0, 110.0, 60.0, 200.0]


def _paragraph_cells(label_column: bool) -> list[list[Any]]:
    """ROWS as reportlab paragraphs in the styles the table gives each cell."""
    right = ParagraphStyle("r", parent=STYLES.cell, alignment=TA_RIGHT)
    out: list[list[Any]] = []
    for r, row in enumerate(ROWS):
        cells: list[Any] = []
        for c, value in enumerate(row):
            if r == 0 or (label_column and c == 0):
                st = STYLES.cell_bold
            else:
                st = right if c >= 1 else STYLES.cell  # align_right_from=1
            cells.append(Paragraph(esc(value), st))
        out.append(cells)
    return out


def test_plain_string_cells_draw_what_paragraph_cells_draw() -> None:
    for label_column in (False, True):
        fast = grid_table(ROWS, WIDTHS, label_column=label_column, align_right_from=1)
        general = grid_table(_paragraph_cells(label_column), WIDTHS, label_column=label_column,
                             align_right_from=1)
        kinds = [[type(v).__name__ for v in row] for row in fast._cellvalues]
        assert kinds[1] == ["str", "str", "str", "str"]  # the shortcut is taken ...
        assert kinds[2][3] == kinds[3][3] == "Paragraph"  # ... but not for wrapping or spaces
        assert _pixels([fast]) == _pixels([general])


def _drawing(fig: Figure) -> Drawing:
    """``fig`` as a reportlab shape tree, the general way (the renderer before issue 13)."""
    d = Drawing(fig.width, fig.height)

    def pen(shape: Any, name: str) -> None:
        s = style(name)
        shape.strokeColor = HexColor(s.stroke) if s.stroke else None
        shape.strokeWidth = s.width
        shape.strokeDashArray = list(s.dash) if s.dash else None
        if hasattr(shape, "fillColor"):
            shape.fillColor = HexColor(s.fill) if s.fill else None

    for item in fig.items:
        if isinstance(item, Line):
            line = RLLine(item.x1, item.y1, item.x2, item.y2)
            pen(line, item.style)
            d.add(line)
            if item.arrow:
                a = math.atan2(item.y2 - item.y1, item.x2 - item.x1)
                head = Polygon([item.x2, item.y2,
                                item.x2 - 5 * math.cos(a - 0.4), item.y2 - 5 * math.sin(a - 0.4),
                                item.x2 - 5 * math.cos(a + 0.4), item.y2 - 5 * math.sin(a + 0.4)])
                head.fillColor, head.strokeColor = HexColor("#1d232a"), None
                d.add(head)
        elif isinstance(item, Polyline):
            pts = [c for p in item.points for c in p]
            shape = Polygon(pts) if item.closed else PolyLine(pts)
            pen(shape, item.style)
            d.add(shape)
        elif isinstance(item, Circle):
            circle = RLCircle(item.cx, item.cy, item.r)
            pen(circle, item.style)
            d.add(circle)
        elif isinstance(item, Rect):
            rect = RLRect(item.x, item.y, item.width, item.height)
            pen(rect, item.style)
            d.add(rect)
        elif isinstance(item, Text):
            s = style(item.style)
            d.add(String(item.x, item.y, item.text,
                         fontName="Helvetica-Bold" if s.bold else "Helvetica",
                         fontSize=s.font_size, fillColor=HexColor(s.fill or "#1d232a"),
                         textAnchor=item.anchor))
    return d


def test_figures_drawn_on_the_canvas_look_as_reportlab_graphics_draws_them() -> None:
    figures = report.polar_figures(certificate_data())
    figures.append(Figure(120, 80, [
        Rect(5, 5, 30, 40, "bar"), Rect(40, 5, 30, 20, "bar_bad"),
        Polyline(((0, 0), (50, 60), (100, 10)), "series"),
        Polyline(((60, 60), (80, 70), (90, 50)), "point", closed=True),
        Circle(100, 60, 6, "flagged"), Text(60, 72, "a title", "title", "middle"),
        Text(118, 2, "end", "small", "end"), Line(0, 40, 110, 40, "operating"),
        # outside Windows-1252 or a control character: reportlab's text object (its
        # substitution fonts) draws it
        Text(60, 20, "≤ 5 µm", "small", "middle"), Text(4, 30, "ok", "label"),
        Text(100, 30, "a\x07b", "small", "end")]))
    assert _pixels([FigureFlowable(f) for f in figures]) == _pixels(
        [_drawing(f) for f in figures])


def test_circles_are_written_as_reportlabs_canvas_circle_writes_them() -> None:
    # draw_figure works a circle's arcs out from cached angles; reportlab's canvas.circle
    # is the reference, byte for byte (uncompressed), over random circles and paints.
    rnd = random.Random(13)
    circles = [(rnd.uniform(-50, 600), rnd.uniform(-50, 800),
                rnd.choice([0.0, rnd.uniform(0, 300), rnd.uniform(0, 1e-3)]),
                rnd.random() < 0.5, rnd.random() < 0.5) for _ in range(2000)]

    def pdf(draw: Any) -> bytes:
        buf = io.BytesIO()
        canvas = Canvas(buf, invariant=1, pageCompression=0)
        for cx, cy, r, stroke, fill in circles:
            draw(canvas, cx, cy, r, stroke, fill)
        canvas.showPage()
        canvas.save()
        return buf.getvalue()

    assert pdf(_circle) == pdf(lambda c, cx, cy, r, stroke, fill: c.circle(
        cx, cy, r, stroke=int(stroke), fill=int(fill)))
