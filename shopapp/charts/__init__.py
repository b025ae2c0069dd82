"""Chart geometry as plain data.

Each chart module (``polar``, ``bars``, ``trend``) turns numbers into a
:class:`Figure` of primitives in a unit box; :mod:`shopapp.charts.svg` renders a
figure as inline SVG for the web, and :mod:`shopapp.reports.drawing` draws the
same figure with reportlab graphics. No chart logic lives anywhere else.
Like the balancing core, this package imports neither Flask, SQLAlchemy nor reportlab.
"""

from shopapp.charts.primitives import Circle, Figure, Line, Polyline, Rect, Text

__all__ = ["Circle", "Figure", "Line", "Polyline", "Rect", "Text"]
