"""Certificate rendering speed against the floor of a one-line reportlab page; prints JSON.

Goal (issue: certificates): median certificate render ≤ 5 × the median time of a
one-page reportlab document with one line of text, rendered in the same process.
"""

from __future__ import annotations

import io
import json
import statistics
import sys
import time
from collections.abc import Callable
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

RATIO_GOAL = 5.0


def _median_s(func: Callable[[], object], repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def _one_line_pdf() -> bytes:
    """A one-page platypus document with one paragraph: the same machinery, least content."""
    from reportlab.lib.pagesizes import A4
    from reportlab.lib.styles import getSampleStyleSheet
    from reportlab.platypus import Paragraph, SimpleDocTemplate

    buf = io.BytesIO()
    doc = SimpleDocTemplate(buf, pagesize=A4, invariant=1)
    doc.build([Paragraph("Balance certificate", getSampleStyleSheet()["Normal"])])
    return buf.getvalue()


def bench_certificate(repeats: int = 30) -> dict[str, object]:
    """Median seconds for one certificate and for the one-line floor, and their ratio."""
    from shopapp.reports.certificate import render
    from tests.reports.samples import certificate_data

    data = certificate_data()
    render(data)  # warm fonts and imports
    _one_line_pdf()
    cert_s = _median_s(lambda: render(data), repeats)
    floor_s = _median_s(_one_line_pdf, repeats)
    return {
        "certificate_render_median_s": cert_s,
        "one_line_pdf_median_s": floor_s,
        "ratio": cert_s / floor_s,
        "ratio_goal": RATIO_GOAL,
        "meets_goal": cert_s / floor_s <= RATIO_GOAL,
        "repeats": repeats,
    }


def main() -> None:
    print(json.dumps({"certificate": bench_certificate()}, indent=2))


if __name__ == "__main__":
    main()
