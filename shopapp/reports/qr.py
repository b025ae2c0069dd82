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
from reportlab.pdfgen.canvas import Canvas

ERROR_LEVEL = "M"
QUIET_ZONE_MODULES = 4


def _dark_runs(text: str, size_pt: float) -> tuple[float, list[tuple[float, float, float]]]:
    """The QR code of ``text`` in a square ``size_pt`` wide (quiet zone included): the
    module size and each run of dark modules in a row as (left, top, width), PDF y up."""
    code = qrencoder.QRCode(None, getattr(qrencoder.QRErrorCorrectLevel, ERROR_LEVEL))
    code.addData(text)
    code.make()
    count = code.getModuleCount()
    box = size_pt / (count + 2 * QUIET_ZONE_MODULES)
    runs = []
    for r, row in enumerate(code.modules):
        top = size_pt - (r + QUIET_ZONE_MODULES) * box
        c = 0
        for dark, run in itertools.groupby(bool(m) for m in row):
            n = len(list(run))
            if dark:
                runs.append(((c + QUIET_ZONE_MODULES) * box, top, n * box))
            c += n
    return box, runs


def qr_drawing(text: str, size_pt: float) -> Drawing:
    """A square drawing ``size_pt`` wide holding the QR code of ``text`` (quiet zone included)."""
    box, runs = _dark_runs(text, size_pt)
    path = Path(fillColor=colors.black, strokeColor=None, strokeWidth=0)
    for left, top, width in runs:
        path.moveTo(left, top - box)
        path.lineTo(left + width, top - box)
        path.lineTo(left + width, top)
        path.lineTo(left, top)
        path.closePath()
    drawing = Drawing(size_pt, size_pt)
    drawing.add(path)
    return drawing


def draw_qr(canvas: Canvas, text: str, x: float, y: float, size_pt: float) -> None:
    """The QR code of ``text`` straight onto ``canvas``, ``size_pt`` square with its lower
    left corner at (``x``, ``y``): the path :func:`qr_drawing` holds, as one filled path."""
    box, runs = _dark_runs(text, size_pt)
    canvas.saveState()
    canvas.setFillColor(colors.black)
    path = canvas.beginPath()
    for left, top, width in runs:
        path.rect(x + left, y + top - box, width, box)
    canvas.drawPath(path, stroke=0, fill=1)
    canvas.restoreState()
