"""How numbers reach people: the one formatter for pages, CSV, PDFs and messages.

Every number a person reads goes through :func:`number` (or a helper here that
calls it): never scientific notation, significant figures chosen by the unit,
an en dash for "nothing to show" (None, NaN, infinity). Pages reach these as
Jinja filters (``shopapp.web.templating``), reports and CSV call them directly.

:class:`ShopDisplay` adds the shop's display convention on top: the unit
unbalance is shown in and the angle sense and zero (docs/architecture.md,
"Conventions": inside shopapp angles are degrees in the direction of rotation
from the reference mark, unbalance is g·mm; conversion happens at the edges).
"""

from __future__ import annotations

import cmath
import datetime as dt
import decimal
import math
from typing import Any, overload

from shopapp.balancing import numtext
from shopapp.balancing.numtext import figures
from shopapp.balancing.phasors import from_display_deg, to_display_deg
from shopapp.balancing.units import convert_unbalance
from shopapp.core.clock import shop_date

NOTHING = "–"

# Significant figures by unit: what a balancing shop reads off its instruments.
SIGNIFICANT_FIGURES: dict[str, int] = {
    "g·mm": 3, "g·cm": 3, "kg·m": 3, "g·in": 3, "oz·in": 3, "g": 3, "kg": 3, "oz": 3,
    "mm": 3, "µm": 3, "mm/s": 3, "mils": 3, "in/s": 3, "%": 2, "Hz": 3,
}
# Units shown with a fixed number of decimals instead (angles to the degree, speeds to the rpm).
FIXED_DECIMALS: dict[str, int] = {"°": 0, "rpm": 0, "d": 1, "days": 1}


def _finite(value: Any) -> float | None:
    if value is None or isinstance(value, bool):
        return None
    try:
        out = float(value)
    except (TypeError, ValueError):
        return None
    return out if math.isfinite(out) else None


def number(value: Any, sig: int = 3, *, trim: bool = False) -> str:
    """``value`` with ``sig`` significant figures and never an exponent.

    Numbers of ``sig`` digits or more before the point print as whole numbers
    (18 900 g·mm is ``18900``, not ``1.89e+04``); smaller ones get the decimals
    the figures need (``12.3``, ``0.00123``). None, NaN and infinity print as an
    en dash. ``trim`` drops trailing zeros after the point (``10`` rather than
    ``10.0``): chart ticks and labels. The digits come from
    :func:`shopapp.balancing.numtext.figures` (one algorithm for pages and messages).
    """
    v = _finite(value)
    return NOTHING if v is None else figures(v, sig, trim=trim)


def p_text(p_value: Any) -> str:
    """A test's p-value as ``p = 0.023`` (two significant figures) or ``p < 0.001``
    (never an exponent)."""
    v = _finite(p_value)
    if v is None:
        return f"p {NOTHING}"
    return numtext.p_text(v)


def fixed(value: Any, decimals: int) -> str:
    """``value`` with a fixed number of decimals (an en dash when there is none)."""
    v = _finite(value)
    return NOTHING if v is None else f"{v:.{decimals}f}"


def plain(value: Any) -> str:
    """A number as typed back into a form field: up to 6 significant figures, no exponent."""
    v = _finite(value)
    return "" if v is None else number(v, 6, trim=True)


def typed(value: Any, unit: str) -> str:
    """A quantity typed back into a form field with the figures the pages show it with
    (:data:`SIGNIFICANT_FIGURES`), trailing zeros dropped: a prefill the person reads as
    the advice shown beside it, not six figures of arithmetic (``8.346…`` g is ``8.35``)."""
    v = _finite(value)
    return "" if v is None else number(v, SIGNIFICANT_FIGURES.get(unit, 6), trim=True)


def quantity(value: Any, unit: str) -> str:
    """``value unit`` with the figures the unit calls for (``12.3 g·mm``, ``1480 rpm``, ``45°``)."""
    if unit in FIXED_DECIMALS:
        text = fixed(value, FIXED_DECIMALS[unit])
    else:
        text = number(value, SIGNIFICANT_FIGURES.get(unit, 3))
    if text == NOTHING:
        return NOTHING
    return f"{text}°" if unit == "°" else f"{text} {unit}"


def counted(n: int, noun: str) -> str:
    """``n`` and the noun, plural unless ``n`` is one (``1 job``, ``3 jobs``)."""
    return f"{n} {noun}" if n == 1 else f"{n} {noun}s"


def percent(rate: Any, decimals: int = 0) -> str:
    """A rate 0..1 as a percentage (``0.183`` → ``18 %``)."""
    v = _finite(rate)
    return NOTHING if v is None else f"{v * 100:.{decimals}f} %"


def of_limit(pct: Any) -> str:
    """A residual as a share of its limit, ``pct`` in percent (``83.4`` → ``83 %``), never
    shown on the wrong side of 100 %: between 99 % and 101 % one decimal, cut towards 100
    (``99.97`` → ``99.9 %``, ``100.03`` → ``100.1 %``, exactly ``100`` → ``100.0 %``), so
    the figure beside an "in" verdict never reads above 100 % and beside an "out" never
    reads 100 % or less. Whole percent elsewhere (ordinary rounding cannot reach 100 there).
    """
    v = _finite(pct)
    if v is None:
        return NOTHING
    if 99.0 <= v <= 101.0:
        # From the float's shortest decimal text, so 99.3 stays 99.3 (99.3 × 10 is 992.99…).
        cut = decimal.ROUND_FLOOR if v < 100.0 else decimal.ROUND_CEILING
        return f"{decimal.Decimal(repr(v)).quantize(decimal.Decimal('0.1'), rounding=cut)} %"
    return f"{v:.0f} %"


def date(value: str | dt.date | dt.datetime | None) -> str:
    """An ISO date (``YYYY-MM-DD``); datetimes print the shop's day of them
    (:func:`shopapp.core.clock.shop_date`)."""
    if value is None or value == "":
        return NOTHING
    if isinstance(value, str):
        return value[:10]
    if isinstance(value, dt.datetime):
        return shop_date(value).isoformat()
    return value.isoformat()


def csv_number(value: Any) -> str:
    """A number for a machine-readable CSV cell: up to 4 decimals, no exponent, empty for none."""
    v = _finite(value)
    if v is None:
        return ""
    if v % 1 == 0:
        return f"{v:.0f}"
    return f"{v:.4f}".rstrip("0").rstrip(".")


class ShopDisplay:
    """The shop's display convention: the unbalance unit and the angle sense and zero.

    ``settings`` is the shop's settings row (``unbalance_unit``, ``angle_sense``,
    ``angle_zero_deg``). Internal values are g·mm and degrees in the direction of
    rotation from the reference mark.
    """

    def __init__(self, settings: Any) -> None:
        self.sense: str = settings.angle_sense
        self.zero: float = settings.angle_zero_deg
        self.unit: str = settings.unbalance_unit

    @overload
    def angle(self, internal_deg: float) -> float: ...

    @overload
    def angle(self, internal_deg: None) -> None: ...

    def angle(self, internal_deg: float | None) -> float | None:
        """An internal angle as the shop reads it (degrees), or None."""
        if internal_deg is None:
            return None
        return to_display_deg(internal_deg, sense=self.sense, zero_deg=self.zero)

    def internal(self, display_deg: float | None) -> float | None:
        """A shop-convention angle as internal degrees, or None."""
        if display_deg is None:
            return None
        return from_display_deg(display_deg, sense=self.sense, zero_deg=self.zero)

    def unb(self, gmm: float) -> float:
        """g·mm in the shop's unit."""
        return convert_unbalance(gmm, "g·mm", self.unit)

    def to_gmm(self, value: float | None) -> float | None:
        """A value in the shop's unit as g·mm, or None."""
        if value is None:
            return None
        return convert_unbalance(value, self.unit, "g·mm")

    def u(self, gmm: float | None) -> str:
        """An unbalance in the shop's unit, e.g. ``12.3 g·mm``."""
        v = _finite(gmm)
        return NOTHING if v is None else quantity(self.unb(v), self.unit)

    def a(self, internal_deg: float | None) -> str:
        """An angle in the shop's convention, e.g. ``135°``."""
        return quantity(self.angle(internal_deg), "°")

    def mass_angle(self, vector_g: complex | None) -> str:
        """A mass vector (grams at a radius) as ``12.0 g at 40°`` in the shop's angle convention."""
        if vector_g is None:
            return NOTHING
        v = complex(vector_g)
        if not (math.isfinite(v.real) and math.isfinite(v.imag)):
            return NOTHING
        return f"{quantity(abs(v), 'g')} at {self.a(math.degrees(cmath.phase(v)) % 360.0)}"
