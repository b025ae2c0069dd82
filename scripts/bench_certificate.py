"""Certificate rendering speed against the same content drawn on a plain canvas; prints JSON.

Goal (issue 13): median certificate render ≤ 1.3 × the median time of a plain-canvas
floor of the same content, both measured side by side in one run (alternating, so a
busy machine slows both alike).

The floor is taken from the shipped PDF itself (before timing): every text run pypdf
reads from each page, with its font, size and position, and the polar plots' line art
from the same figures the certificate draws. Timed, the floor writes those runs with
``drawString`` and the plots with canvas lines and circles on a
``reportlab.pdfgen.canvas.Canvas`` — no platypus, no tables, no paragraphs. The table
rules and shading are left out, so the floor is if anything too fast, never too slow.
"""

from __future__ import annotations

import io
import json
import statistics
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import bench_shop

RATIO_GOAL = 1.3

TextRun = tuple[str, float, float, float, str]  # font, size, x, y, text


def _page_runs(pdf: bytes) -> list[list[TextRun]]:
    """Every text run of every page of ``pdf``, as pypdf reads it."""
    import pypdf

    pages = []
    for page in pypdf.PdfReader(io.BytesIO(pdf)).pages:
        runs: list[TextRun] = []

        def visit(text: str, cm: Any, tm: Any, font: Any, size: float,
                  runs: list[TextRun] = runs) -> None:
            text = text.strip("\n")
            if text.strip():
                m = pypdf.mult(tm, cm)
                runs.append((str(font["/BaseFont"])[1:], size * m[3], m[4], m[5], text))

        page.extract_text(visitor_text=visit)
        pages.append(runs)
    return pages


def _figure_art(canvas: Any, fig: Any, x0: float, y0: float) -> None:
    """The figure's lines, polylines, circles and rectangles (its texts are in the runs)."""
    from reportlab.lib.colors import HexColor

    from shopapp.charts.primitives import Circle, Line, Polyline, Rect
    from shopapp.charts.styles import style

    for item in fig.items:
        s = style(item.style)
        canvas.setStrokeColor(HexColor(s.stroke) if s.stroke else HexColor("#ffffff"))
        canvas.setLineWidth(s.width)
        canvas.setDash(list(s.dash) if s.dash else [])
        if isinstance(item, Line):
            canvas.line(x0 + item.x1, y0 + item.y1, x0 + item.x2, y0 + item.y2)
        elif isinstance(item, Polyline):
            pts = [(x0 + x, y0 + y) for x, y in item.points]
            path = canvas.beginPath()
            path.moveTo(*pts[0])
            for p in pts[1:]:
                path.lineTo(*p)
            if item.closed:
                path.close()
            canvas.drawPath(path, stroke=1, fill=0)
        elif isinstance(item, Circle):
            canvas.circle(x0 + item.cx, y0 + item.cy, item.r, stroke=1, fill=0)
        elif isinstance(item, Rect):
            canvas.rect(x0 + item.x, y0 + item.y, item.width, item.height, stroke=1, fill=0)


def plain_canvas(pages: list[list[TextRun]], figures: list[Any]) -> bytes:
    """The floor: the same text runs and plot line art straight onto a canvas."""
    from reportlab.lib.pagesizes import A4
    from reportlab.pdfgen.canvas import Canvas

    buf = io.BytesIO()
    canvas = Canvas(buf, pagesize=A4, invariant=1)
    for number, runs in enumerate(pages):
        font = ("", 0.0)
        for name, size, x, y, text in runs:
            if (name, size) != font:
                canvas.setFont(name, size)
                font = (name, size)
            canvas.drawString(x, y, text)
        if number == 1:  # the plots sit on the second page of the sample
            for k, fig in enumerate(figures):
                _figure_art(canvas, fig, 60 + k * 250, 200)
        canvas.showPage()
    canvas.save()
    return buf.getvalue()


def _medians_side_by_side(funcs: dict[str, Callable[[], object]],
                          repeats: int) -> dict[str, float]:
    """Median seconds of each function, calling them in turn ``repeats`` times."""
    times: dict[str, list[float]] = {name: [] for name in funcs}
    for _ in range(repeats):
        for name, func in funcs.items():
            start = time.perf_counter()
            func()
            times[name].append(time.perf_counter() - start)
    return {name: statistics.median(t) for name, t in times.items()}


def bench_certificate(repeats: int = 30) -> dict[str, Any]:
    """Median seconds for one certificate and for its plain-canvas floor, and their ratio."""
    from shopapp.reports.certificate import polar_figures, render
    from tests.reports.samples import certificate_data

    data = certificate_data()
    pdf = render(data)  # also warms fonts and imports
    pages = _page_runs(pdf)
    figures = polar_figures(data)
    floor = plain_canvas(pages, figures)
    medians = _medians_side_by_side(
        {"certificate": lambda: render(data), "floor": lambda: plain_canvas(pages, figures)},
        repeats)
    value = medians["certificate"] / medians["floor"]
    return {
        "certificate_render_median_s": round(medians["certificate"], 5),
        "plain_canvas_median_s": round(medians["floor"], 5),
        "pages": len(pages),
        "text_runs": sum(len(r) for r in pages),
        "floor_pdf_bytes": len(floor),
        "repeats": repeats,
        "ratios": [bench_shop.ratio("certificate_over_plain_canvas", value, RATIO_GOAL)],
    }


def main() -> dict[str, Any]:
    """Print the figures as JSON and return them (``scripts/bench all`` summarises ratios)."""
    out = bench_certificate()
    print(json.dumps({"certificate": out}, indent=2))
    return out


if __name__ == "__main__":
    main()
