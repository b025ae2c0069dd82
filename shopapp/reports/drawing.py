"""Draw a :class:`~shopapp.charts.Figure` in a PDF (same geometry as the SVG).

The primitives go straight onto the canvas, each in its own saved graphics state,
with the operators reportlab's ``renderPDF`` would write for the same shapes: the
same picture without building and validating a ``Drawing`` shape tree first, which
took a third of a certificate's render (issue 13).
"""

from __future__ import annotations

import math
from functools import cache

from reportlab.lib.colors import Color, HexColor
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import Flowable

from shopapp.charts.primitives import Circle, Figure, Line, Polyline, Rect, Text
from shopapp.charts.styles import Style, style

_ARROW = "#1d232a"  # arrowheads and texts without a fill of their own


@cache
def _color(hex_text: str) -> Color:
    return HexColor(hex_text)


def _pen(canvas: Canvas, s: Style) -> tuple[bool, bool]:
    """Set the style's stroke, width, dash and fill; whether to stroke and to fill."""
    if s.stroke:
        canvas.setStrokeColor(_color(s.stroke))
    canvas.setLineWidth(s.width)
    if s.dash:
        canvas.setDash(list(s.dash), 0)
    if s.fill:
        canvas.setFillColor(_color(s.fill))
    return bool(s.stroke), bool(s.fill)


def draw_figure(canvas: Canvas, fig: Figure, scale: float = 1.0) -> None:
    """Draw ``fig`` with its origin at the canvas origin; figure y grows upward, as in PDF."""
    k = scale
    for item in fig.items:
        s = style(item.style)
        canvas.saveState()
        if isinstance(item, Text):
            canvas.setFillColor(_color(s.fill or _ARROW))
            canvas.setFont("Helvetica-Bold" if s.bold else "Helvetica", s.font_size * k)
            x, y = item.x * k, item.y * k
            if item.anchor == "middle":
                canvas.drawCentredString(x, y, item.text)
            elif item.anchor == "end":
                canvas.drawRightString(x, y, item.text)
            else:
                canvas.drawString(x, y, item.text)
            canvas.restoreState()
            continue
        stroke, fill = _pen(canvas, s)
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
                canvas.drawPath(path, stroke=int(stroke), fill=int(fill))
            elif stroke:  # an open line is never filled
                canvas.drawPath(path, stroke=1, fill=0)
        elif isinstance(item, Circle):
            canvas.circle(item.cx * k, item.cy * k, item.r * k, stroke=int(stroke),
                          fill=int(fill))
        elif isinstance(item, Rect):
            canvas.rect(item.x * k, item.y * k, item.width * k, item.height * k,
                        stroke=int(stroke), fill=int(fill))
        canvas.restoreState()
        if isinstance(item, Line) and item.arrow:
            _arrowhead(canvas, item, k)


def _arrowhead(canvas: Canvas, line: Line, k: float) -> None:
    ang = math.atan2(line.y2 - line.y1, line.x2 - line.x1)
    size = 5.0 * k
    x, y = line.x2 * k, line.y2 * k
    canvas.saveState()
    canvas.setFillColor(_color(_ARROW))
    path = canvas.beginPath()
    path.moveTo(x, y)
    path.lineTo(x - size * math.cos(ang - 0.4), y - size * math.sin(ang - 0.4))
    path.lineTo(x - size * math.cos(ang + 0.4), y - size * math.sin(ang + 0.4))
    path.close()
    canvas.drawPath(path, stroke=0, fill=1)
    canvas.restoreState()


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

