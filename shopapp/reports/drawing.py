"""Draw a :class:`~shopapp.charts.Figure` with reportlab graphics (same geometry as the SVG)."""

from __future__ import annotations

from typing import Any

from reportlab.graphics.shapes import Circle as RLCircle
from reportlab.graphics.shapes import Drawing, Polygon, PolyLine, String
from reportlab.graphics.shapes import Line as RLLine
from reportlab.graphics.shapes import Rect as RLRect
from reportlab.lib.colors import HexColor

from shopapp.charts.primitives import Circle, Figure, Line, Polyline, Rect, Text
from shopapp.charts.styles import Style, style

_ANCHOR = {"start": "start", "middle": "middle", "end": "end"}


def _apply(shape: Any, s: Style) -> None:
    shape.strokeColor = HexColor(s.stroke) if s.stroke else None
    shape.strokeWidth = s.width
    shape.strokeDashArray = list(s.dash) if s.dash else None
    if hasattr(shape, "fillColor"):
        shape.fillColor = HexColor(s.fill) if s.fill else None


def to_drawing(fig: Figure, scale: float = 1.0) -> Drawing:
    """A reportlab ``Drawing`` of ``fig``; figure y already grows upward, as in PDF."""
    d = Drawing(fig.width * scale, fig.height * scale)
    k = scale
    for item in fig.items:
        if isinstance(item, Line):
            shape = RLLine(item.x1 * k, item.y1 * k, item.x2 * k, item.y2 * k)
            _apply(shape, style(item.style))
            d.add(shape)
            if item.arrow:
                _arrowhead(d, item, k)
        elif isinstance(item, Polyline):
            pts = [c * k for p in item.points for c in p]
            shape = Polygon(pts) if item.closed else PolyLine(pts)
            _apply(shape, style(item.style))
            d.add(shape)
        elif isinstance(item, Circle):
            shape = RLCircle(item.cx * k, item.cy * k, item.r * k)
            _apply(shape, style(item.style))
            d.add(shape)
        elif isinstance(item, Rect):
            shape = RLRect(item.x * k, item.y * k, item.width * k, item.height * k)
            _apply(shape, style(item.style))
            d.add(shape)
        elif isinstance(item, Text):
            s = style(item.style)
            shape = String(
                item.x * k, item.y * k, item.text,
                fontName="Helvetica-Bold" if s.bold else "Helvetica",
                fontSize=s.font_size * k,
                fillColor=HexColor(s.fill or "#1d232a"),
                textAnchor=_ANCHOR.get(item.anchor, "start"),
            )
            d.add(shape)
    return d


def _arrowhead(d: Drawing, line: Line, k: float) -> None:
    import math

    ang = math.atan2(line.y2 - line.y1, line.x2 - line.x1)
    size = 5.0 * k
    x, y = line.x2 * k, line.y2 * k
    pts = [
        x, y,
        x - size * math.cos(ang - 0.4), y - size * math.sin(ang - 0.4),
        x - size * math.cos(ang + 0.4), y - size * math.sin(ang + 0.4),
    ]
    head = Polygon(pts)
    head.fillColor = HexColor("#1d232a")
    head.strokeColor = None
    d.add(head)
