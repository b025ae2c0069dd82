"""The certificate's traceability part: key convention, arbor, the residual-unbalance test
with its plot, and the balance errors (ΔU) with the verdict rule used.

Plain data in (the lines below, carried by
:class:`shopapp.reports.certificate.CertificateData`), blocks placed on a
:class:`shopapp.reports.sheet.Sheet` out. The plot
is :func:`shopapp.charts.circle_fit.circle_fit_figure`, the job page's chart.
Angles stored here are already in the shop's display convention.
"""

from __future__ import annotations

import cmath
import math
from dataclasses import dataclass
from typing import Any

from reportlab.lib.units import mm

from shopapp.charts import Figure
from shopapp.charts.circle_fit import ReadingPoint, circle_fit_figure
from shopapp.core import display
from shopapp.reports.common import STYLES
from shopapp.reports.sheet import CONTENT_WIDTH, Figures, Gap, Grid, Sheet, Text

# Greek letters our texts use that the PDF's standard fonts cannot show.
_GREEK = {"ΔU": "dU", "Δ": "d", "ρ": "rho"}


def _t(text: str) -> str:
    """``text`` with the Greek letters spelled out."""
    for k, v in _GREEK.items():
        text = text.replace(k, v)
    return text


@dataclass(frozen=True)
class ResidualTestLine:
    """A plane's residual-unbalance test as certified (angles in display degrees)."""

    plane: int
    test_mass_g: float
    test_radius_mm: float
    test_unbalance_gmm: float
    positions: int
    method: str  # "phase" | "amplitude"
    reading_unit: str
    residual_gmm: float
    residual_shop: float
    residual_angle_deg: float | None
    limit_gmm: float
    limit_shop: float
    passed: bool
    fit_rms_pct: float
    circle_radius: float
    # (position_deg, amplitude, phase_deg | None) per position
    readings: tuple[tuple[float, float, float | None], ...]


@dataclass(frozen=True)
class ErrorLine:
    """A plane's balance-error estimate and the verdict with it."""

    plane: int
    delta_u_gmm: float
    delta_u_shop: float
    random_shop: float
    systematic: str  # in words
    residual_shop: float
    limit_shop: float
    effective_limit_shop: float
    negligible: bool
    passed: bool
    rule: str


def lines_from_dict(raw: dict[str, Any]) -> dict[str, Any]:
    """Turn the stored lists back into lines (for ``CertificateData.from_dict``)."""
    out = dict(raw)
    out["residual_tests"] = tuple(
        ResidualTestLine(**{**v, "readings": tuple(tuple(r) for r in v["readings"])})
        for v in raw.get("residual_tests", ()))
    out["balance_errors"] = tuple(ErrorLine(**v) for v in raw.get("balance_errors", ()))
    return out


def residual_test_figures(data: Any, size: float = 190.0) -> list[Figure]:
    """One plot per tested plane (display angles passed with the identity convention)."""
    figures = []
    for t in data.residual_tests:
        pts = [ReadingPoint(p, a, g) for p, a, g in t.readings]
        centre_amp = centre_ang = None
        if t.method == "phase" and all(p.angle_deg is not None for p in pts):
            z = sum(cmath.rect(p.amplitude, math.radians(p.angle_deg or 0.0)) for p in pts)
            z /= len(pts)
            centre_amp, centre_ang = abs(z), math.degrees(cmath.phase(z))
        figures.append(circle_fit_figure(
            pts, method=t.method, circle_radius=t.circle_radius,
            centre_amplitude=centre_amp, centre_angle_deg=centre_ang,
            residual_ratio=t.residual_gmm / t.test_unbalance_gmm,
            residual_angle_deg=t.residual_angle_deg,
            title=f"Plane {t.plane} residual test", unit_label=t.reading_unit, size=size))
    return figures


def has_content(data: Any) -> bool:
    return bool(data.key_statement or data.arbor or data.residual_tests or data.balance_errors)


def place(sheet: Sheet, data: Any, number: str = "4a") -> None:
    """Place the traceability part on ``sheet`` (nothing when there is nothing to state)."""
    if not has_content(data):
        return
    st = STYLES
    w = CONTENT_WIDTH
    sheet.place(Text(_t(f"{number}  Traceability of the result"), st.heading, w))
    for words in (data.key_statement, data.key_compensation, data.arbor):
        if words:
            sheet.place(Text(_t(words), st.body, w))
    if data.residual_tests:
        rows = [["Plane", "Test mass", "Positions", f"Residual ({data.unit})",
                 f"Limit ({data.unit})", "Fit scatter", "Verdict"]]
        for t in data.residual_tests:
            ang = "" if t.residual_angle_deg is None else f" at {t.residual_angle_deg:.0f}°"
            rows.append([f"plane {t.plane}",
                         f"{display.number(t.test_mass_g)} g at "
                         f"{display.number(t.test_radius_mm)} mm",
                         str(t.positions), f"{display.number(t.residual_shop)}{ang}",
                         display.number(t.limit_shop), f"{t.fit_rms_pct:.1f} %",
                         "within" if t.passed else "OUT"])
        sheet.place(
            Text("Residual-unbalance verification test", st.cell_bold, w),
            Grid(rows, [w * 0.1, w * 0.2, w * 0.1, w * 0.19, w * 0.14, w * 0.12, w * 0.15],
                 align_right_from=2),
            Text(_t(
                "A test mass moved round equally spaced positions; the readings are fitted to a "
                "circle by least squares and the residual is the circle's offset scaled by the "
                "test unbalance; the repeat of position 1 agreed within 10 % of the circle's "
                "radius."), st.small, w),
            Gap(2 * mm), Figures(residual_test_figures(data), w))
    if data.balance_errors:
        rows = [["Plane", f"dU ({data.unit})", "of which random", "systematic",
                 f"Limit used ({data.unit})", "Verdict"]]
        for e in data.balance_errors:
            rows.append([f"plane {e.plane}", display.number(e.delta_u_shop),
                         display.number(e.random_shop),
                         e.systematic or "none",
                         display.number(e.effective_limit_shop), "within" if e.passed else "OUT"])
        notes = [f"Verdict rule: {data.error_rule}."]
        if any(e.negligible for e in data.balance_errors):
            notes.append("Where ΔU is at most 10 % of the limit it is neglected (common "
                         "practice).")
        sheet.place(
            Text("Balance errors: error estimate dU (ISO 21940-14 idea)", st.cell_bold, w),
            Grid(rows, [w * 0.1, w * 0.14, w * 0.16, w * 0.3, w * 0.17, w * 0.13],
                 align_right_from=1),
            *[Text(_t(n), st.small, w) for n in notes])
