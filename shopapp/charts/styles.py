"""Named styles shared by the SVG and reportlab renderers (stroke, width, dash, fill).

Distinguished by dash pattern and width as well as by grey level, so a chart
printed in black and white, or read by someone who does not see colour, still
tells its series apart.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Style:
    stroke: str | None = "#1d232a"
    width: float = 1.0
    dash: tuple[float, ...] = ()
    fill: str | None = None
    font_size: float = 9.0
    bold: bool = False


STYLES: dict[str, Style] = {
    "axis": Style(stroke="#1d232a", width=0.8),
    "grid": Style(stroke="#b9c1c9", width=0.5, dash=(2, 2)),
    "limit": Style(stroke="#1d232a", width=1.6, dash=(6, 3)),
    "initial": Style(stroke="#5b6570", width=1.4, dash=(4, 2)),
    "check": Style(stroke="#24527a", width=1.2),
    "residual": Style(stroke="#1d232a", width=2.2),
    "trial": Style(stroke="#8a5a00", width=1.0, dash=(1, 2)),
    "fit": Style(stroke="#24527a", width=1.0, dash=(3, 2)),
    "point": Style(stroke="#1d232a", width=1.0, fill="#ffffff"),
    "series": Style(stroke="#24527a", width=1.6),
    "series2": Style(stroke="#1d232a", width=1.6, dash=(5, 3)),
    "series3": Style(stroke="#5b6570", width=1.2, dash=(1, 2)),
    "operating": Style(stroke="#8a5a00", width=1.4, dash=(8, 3, 2, 3)),
    "bar": Style(stroke="#1d232a", width=0.6, fill="#9fb3c8"),
    "bar2": Style(stroke="#1d232a", width=0.6, fill="#e3e7eb"),
    "bar_bad": Style(stroke="#1d232a", width=0.6, fill="#5b6570"),
    # Funnel plots and control charts: a flagged point is filled dark, a point too small
    # to judge is a light dashed ring, a point in a run is a grey-filled marker.
    "flagged": Style(stroke="#1d232a", width=1.2, fill="#1d232a"),
    "unjudged": Style(stroke="#5b6570", width=0.8, dash=(1.5, 1.5), fill="#ffffff"),
    "in_run": Style(stroke="#1d232a", width=1.0, fill="#9fb3c8"),
    "label": Style(stroke=None, fill="#1d232a", font_size=9.0),
    "small": Style(stroke=None, fill="#5b6570", font_size=7.5),
    "title": Style(stroke=None, fill="#1d232a", font_size=11.0, bold=True),
}


def style(name: str) -> Style:
    """The style called ``name`` (unknown names fall back to ``axis``)."""
    return STYLES.get(name, STYLES["axis"])
