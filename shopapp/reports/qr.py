"""QR codes in our PDFs, encoded by reportlab's QR encoder (its ``qrencoder`` module).

Error correction level M (about 15 % of the code may be damaged or dirty and it
still reads, worth having on a shop floor), with the standard four-module quiet zone
around the code.

The dark modules are drawn as one filled path, a rectangle per run of dark modules in
a row, not as reportlab's widget of one validated shape per run: the widget cost about
half of a certificate's render time (a certificate is drawn twice, once to measure).
"""

from __future__ import annotations

import itertools

from reportlab.graphics.barcode import qrencoder
from reportlab.graphics.shapes import Drawing, Path
from reportlab.lib import colors

ERROR_LEVEL = "M"
QUIET_ZONE_MODULES = 4


def qr_drawing(text: str, size_pt: float) -> Drawing:
    """A square drawing ``size_pt`` wide holding the QR code of ``text`` (quiet zone included)."""
    code = qrencoder.QRCode(None, getattr(qrencoder.QRErrorCorrectLevel, ERROR_LEVEL))
    code.addData(text)
    code.make()
    count = code.getModuleCount()
    box = size_pt / (count + 2 * QUIET_ZONE_MODULES)
    path = Path(fillColor=colors.black, strokeColor=None, strokeWidth=0)
    for r, row in enumerate(code.modules):
        top = size_pt - (r + QUIET_ZONE_MODULES) * box
        c = 0
        for dark, run in itertools.groupby(bool(m) for m in row):
            n = len(list(run))
            if dark:
                left = (c + QUIET_ZONE_MODULES) * box
                path.moveTo(left, top - box)
                path.lineTo(left + n * box, top - box)
                path.lineTo(left + n * box, top)
                path.lineTo(left, top)
                path.closePath()
            c += n
    drawing = Drawing(size_pt, size_pt)
    drawing.add(path)
    return drawing
