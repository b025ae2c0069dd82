"""QR codes in our PDFs: reportlab's own widget (``reportlab.graphics.barcode.qr``).

Error correction level M (about 15 % of the code may be damaged or dirty and it
still reads, worth having on a shop floor); the widget keeps the standard
four-module quiet zone around the code.
"""

from __future__ import annotations

from reportlab.graphics.barcode.qr import QrCodeWidget
from reportlab.graphics.shapes import Drawing
from reportlab.lib import colors

ERROR_LEVEL = "M"


def qr_drawing(text: str, size_pt: float) -> Drawing:
    """A square drawing ``size_pt`` wide holding the QR code of ``text`` (quiet zone included)."""
    widget = QrCodeWidget(text, barLevel=ERROR_LEVEL, barFillColor=colors.black)
    x0, y0, x1, y1 = widget.getBounds()
    drawing = Drawing(size_pt, size_pt,
                      transform=[size_pt / (x1 - x0), 0, 0, size_pt / (y1 - y0), 0, 0])
    drawing.add(widget)
    return drawing
