"""Draw a :class:`~shopapp.charts.Figure` in a PDF (same geometry as the SVG).

The primitives go straight onto the canvas with the operators reportlab's ``renderPDF``
would write for the same shapes: the same picture without building and validating a
``Drawing`` shape tree first, which took a third of a certificate's render (issue 13).
"""

from __future__ import annotations

import math
from functools import cache

from reportlab.lib.colors import Color, HexColor
from reportlab.lib.rl_accel import escapePDF, fp_str
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.pdfgen.canvas import FILL_EVEN_ODD, PATH_OPS, Canvas
from reportlab.platypus import Flowable

from shopapp.charts.primitives import Circle, Figure, Line, Polyline, Rect, Text
from shopapp.charts.styles import Style, style
from shopapp.reports.common import shown_as_is, text_width

_ARROW = "#1d232a"  # arrowheads and texts without a fill of their own

# A full circle as reportlab's canvas.circle draws it (pdfgeom.bezierArc over 360°): four
# 90° Bézier arcs. Their cosines, sines and kappa depend on the angles alone, so they are
# worked out once, with bezierArc's own expressions, giving the same numbers.
_KAPPA = abs(4.0 / 3.0 * (1.0 - math.cos(90.0 * math.pi / 360.0))
             / math.sin(90.0 * math.pi / 360.0))
_ARCS = tuple(
    (math.cos(t0), math.sin(t0), math.cos(t1), math.sin(t1))
    for t0, t1 in (((0 + i * 90.0) * math.pi / 180.0, (0 + (i + 1) * 90.0) * math.pi / 180.0)
                   for i in range(4)))


@cache
def _color(hex_text: str) -> Color:
    return HexColor(hex_text)


class _Pen:
    """The stroke, line width, dash and fill last set on the canvas, so a run of items in
    the same style sets them once (a saved and restored state per item cost more than
    drawing the item)."""

    def __init__(self, canvas: Canvas) -> None:
        self.canvas = canvas
        self.stroke: str | None = None
        self.width: float | None = None
        self.dash: tuple[float, ...] | None = None
        self.fill: str | None = None

    def set(self, s: Style) -> tuple[bool, bool]:
        """Set the style's stroke, width, dash and fill; whether to stroke and to fill."""
        canvas = self.canvas
        if s.stroke and s.stroke != self.stroke:
            canvas.setStrokeColor(_color(s.stroke))
            self.stroke = s.stroke
        if s.width != self.width:
            canvas.setLineWidth(s.width)
            self.width = s.width
        if s.dash != self.dash:
            canvas.setDash(list(s.dash), 0)  # [] 0: solid
            self.dash = s.dash
        if s.fill:
            self.fill_with(s.fill)
        return bool(s.stroke), bool(s.fill)

    def fill_with(self, hex_text: str) -> None:
        if hex_text != self.fill:
            self.canvas.setFillColor(_color(hex_text))
            self.fill = hex_text


def draw_figure(canvas: Canvas, fig: Figure, scale: float = 1.0) -> None:
    """Draw ``fig`` with its origin at the canvas origin; figure y grows upward, as in PDF.

    One saved graphics state for the whole figure; the pen is set only where the style
    changes, and consecutive texts share one text object.
    """
    k = scale
    canvas.saveState()
    pen = _Pen(canvas)
    text: _Texts | None = None
    for item in fig.items:
        s = style(item.style)
        if isinstance(item, Text):
            if text is None:
                text = _Texts(canvas)
            text.add(item, s, k)
            continue
        if text is not None:
            text.draw()
            text = None
            pen.fill = None  # the text's fill colour is the canvas's now
        stroke, fill_it = pen.set(s)
        if isinstance(item, Line):
            if stroke:
                canvas.line(item.x1 * k, item.y1 * k, item.x2 * k, item.y2 * k)
        elif isinstance(item, Polyline):
            path = canvas.beginPath()
            (x0, y0), *rest = item.points
            path.moveTo(x0 * k, y0 * k)
            for x, y in rest:
                path.lineTo(x * k, y * k)
            if item.closed:
                path.close()
                canvas.drawPath(path, stroke=int(stroke), fill=int(fill_it))
            elif stroke:  # an open line is never filled
                canvas.drawPath(path, stroke=1, fill=0)
        elif isinstance(item, Circle):
            _circle(canvas, item.cx * k, item.cy * k, item.r * k, stroke, fill_it)
        elif isinstance(item, Rect):
            canvas.rect(item.x * k, item.y * k, item.width * k, item.height * k,
                        stroke=int(stroke), fill=int(fill_it))
        if isinstance(item, Line) and item.arrow:
            _arrowhead(pen, item, k)
    if text is not None:
        text.draw()
    canvas.restoreState()


class _Texts:
    """A run of consecutive texts, written as one PDF text object.

    A text that :func:`~shopapp.reports.common.shown_as_is` is written as the operators
    reportlab's text object writes for it (font, fill colour, text matrix, the text's
    Windows-1252 bytes shown), without the object's per-line font lookup and encoding
    through its codec, which cost a third of drawing a polar plot; as
    :class:`shopapp.reports.sheet.Page` does for the certificate's lines. Any other text
    goes through reportlab's text object (its substitution fonts), in its own text object,
    in turn.
    """

    def __init__(self, canvas: Canvas) -> None:
        self.canvas = canvas
        self.ops: list[str] = []
        self.font: tuple[str, float] | None = None
        self.fill: str | None = None

    def add(self, item: Text, s: Style, k: float) -> None:
        fill = s.fill or _ARROW
        face = ("Helvetica-Bold" if s.bold else "Helvetica", s.font_size * k)
        if not shown_as_is(item.text):
            self.draw()
            self._general(item, fill, face, k)
            return
        ops = self.ops
        if face != self.font:
            name = self.canvas._doc.getInternalFontName(face[0])
            ops.append(f"{name} {fp_str(face[1])} Tf")
            self.font = face
        if fill != self.fill:
            colour = _color(fill)
            ops.append(f"{fp_str(colour.red, colour.green, colour.blue)} rg")
            self.fill = fill
        x = item.x * k
        if item.anchor != "start":
            width = text_width(item.text, *face)
            x -= width / 2 if item.anchor == "middle" else width
        ops.append(f"1 0 0 1 {fp_str(x, item.y * k)} Tm "
                   f"({escapePDF(item.text.encode('cp1252'))}) Tj")

    def _general(self, item: Text, fill: str, face: tuple[str, float], k: float) -> None:
        text = self.canvas.beginText()
        text.setFillColor(_color(fill))
        text.setFont(*face)
        x = item.x * k
        if item.anchor != "start":
            width = stringWidth(item.text, *face)
            x -= width / 2 if item.anchor == "middle" else width
        text.setTextOrigin(x, item.y * k)
        text.textLine(item.text)
        self.canvas.drawText(text)
        self.font = None  # a new text object starts without a font or colour of ours
        self.fill = None

    def draw(self) -> None:
        """Write the texts added since the last call (over what is drawn before them)."""
        if self.ops:
            self.canvas.addLiteral("BT\n" + "\n".join(self.ops) + "\nET")
            self.ops = []
            self.font = None
            self.fill = None


def _circle(canvas: Canvas, cx: float, cy: float, r: float, stroke: bool, fill: bool) -> None:
    """What ``canvas.circle(cx, cy, r, stroke, fill)`` writes, with the arcs' angles worked
    out once (the trigonometry per circle cost more than the rest of a figure's lines)."""
    # canvas.circle -> canvas.ellipse(cx - r, cy - r, cx + r, cy + r) -> path.ellipse(x, y,
    # width, height) -> bezierArc(x, y, x + width, y + height): the same steps, same floats.
    left, low, right, high = cx - r, cy - r, cx + r, cy + r
    x, y, width, height = left, low, right - left, high - low
    ax, ay, bx, by = x, y, x + width, y + height
    x1, y1, x2, y2 = min(ax, bx), max(ay, by), max(ax, bx), min(ay, by)
    x_cen, y_cen = (x1 + x2) / 2.0, (y1 + y2) / 2.0
    rx, ry = (x2 - x1) / 2.0, (y2 - y1) / 2.0
    kappa = _KAPPA
    c0, s0 = _ARCS[0][:2]
    ops = ["n", f"{fp_str(x_cen + rx * c0, y_cen - ry * s0)} m"]  # "n": as a new path object
    for c0, s0, c1, s1 in _ARCS:
        numbers = fp_str(x_cen + rx * (c0 - kappa * s0), y_cen - ry * (s0 + kappa * c0),
                         x_cen + rx * (c1 + kappa * s1), y_cen - ry * (s1 - kappa * c1),
                         x_cen + rx * c1, y_cen - ry * s1)
        ops.append(f"{numbers} c")
    # the painting operator in reportlab's default fill mode (even-odd), which ours keep
    ops.append(PATH_OPS[int(stroke), int(fill), FILL_EVEN_ODD])
    canvas.addLiteral("\n".join(ops))



def _arrowhead(pen: _Pen, line: Line, k: float) -> None:
    canvas = pen.canvas
    ang = math.atan2(line.y2 - line.y1, line.x2 - line.x1)
    size = 5.0 * k
    x, y = line.x2 * k, line.y2 * k
    pen.fill_with(_ARROW)
    path = canvas.beginPath()
    path.moveTo(x, y)
    path.lineTo(x - size * math.cos(ang - 0.4), y - size * math.sin(ang - 0.4))
    path.lineTo(x - size * math.cos(ang + 0.4), y - size * math.sin(ang + 0.4))
    path.close()
    canvas.drawPath(path, stroke=0, fill=1)


class FigureFlowable(Flowable):
    """``fig`` as a platypus flowable of the figure's size times ``scale``."""

    def __init__(self, fig: Figure, scale: float = 1.0) -> None:
        super().__init__()
        self.fig = fig
        self.scale = scale
        self.width = fig.width * scale
        self.height = fig.height * scale

    def wrap(self, availWidth: float, availHeight: float) -> tuple[float, float]:
        return self.width, self.height

    def draw(self) -> None:
        draw_figure(self.canv, self.fig, self.scale)

