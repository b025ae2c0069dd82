"""Unit conversions for unbalance, mass, speed and length.

Every conversion goes through one base unit per quantity (g·mm, g, rad/s, mm)
with exact factors:

- 1 in = 25.4 mm exactly,
- 1 lb = 453.59237 g exactly, 1 oz = 1/16 lb = 28.349523125 g exactly,

both fixed by the international yard and pound agreement of 1959. Speed uses
1 rev = 2π rad, so 1 rpm = 2π/60 rad/s and 1 Hz (rev/s) = 2π rad/s.

Unit names are the tuples below (``UNBALANCE_UNITS`` …); a few plain-ASCII
spellings are accepted as well (``"g*mm"``, ``"gmm"``, ``"oz-in"``, ``"rad_s"``).
"""

from __future__ import annotations

import math

from shopapp.balancing.checks import finite
from shopapp.balancing.errors import BalancingInputError

MM_PER_IN = 25.4  # exact, international yard and pound agreement (1959)
G_PER_LB = 453.59237  # exact, international yard and pound agreement (1959)
G_PER_OZ = G_PER_LB / 16.0  # avoirdupois ounce = 1/16 lb = 28.349523125 g exactly

UNBALANCE_UNITS = ("g·mm", "g·cm", "kg·m", "g·in", "oz·in")
MASS_UNITS = ("g", "kg", "oz", "lb")
SPEED_UNITS = ("rpm", "Hz", "rad/s")
LENGTH_UNITS = ("mm", "in")

# Factor from each unit to the base unit of its quantity.
_UNBALANCE_TO_GMM = {
    "g·mm": 1.0,
    "g·cm": 10.0,
    "kg·m": 1000.0 * 1000.0,
    "g·in": MM_PER_IN,
    "oz·in": G_PER_OZ * MM_PER_IN,
}
_MASS_TO_G = {"g": 1.0, "kg": 1000.0, "oz": G_PER_OZ, "lb": G_PER_LB}
_SPEED_TO_RAD_S = {"rpm": 2.0 * math.pi / 60.0, "Hz": 2.0 * math.pi, "rad/s": 1.0}
_LENGTH_TO_MM = {"mm": 1.0, "in": MM_PER_IN}


def _spelling_key(name: str) -> str:
    """Fold separators and case so ``"G*MM"``, ``"g.mm"`` and ``"g·mm"`` meet."""
    out = name.strip().lower()
    for sep in ("·", "*", ".", "-", "_", " ", "⋅"):
        out = out.replace(sep, "")
    return out.replace("/", "")


def _resolve(field: str, unit: str, table: dict[str, float]) -> str:
    if not isinstance(unit, str):
        raise BalancingInputError(field, f"must be a unit name, got {unit!r}")
    if unit in table:
        return unit
    wanted = _spelling_key(unit)
    for name in table:
        if _spelling_key(name) == wanted:
            return name
    raise BalancingInputError(field, f"unknown unit {unit!r}; use one of {', '.join(table)}")


def _convert(value: float, from_unit: str, to_unit: str, table: dict[str, float]) -> float:
    src = _resolve("from_unit", from_unit, table)
    dst = _resolve("to_unit", to_unit, table)
    v = finite("value", value)
    if src == dst:
        return v  # no round-off when nothing changes
    return v * table[src] / table[dst]


def convert_unbalance(value: float, from_unit: str, to_unit: str) -> float:
    """Convert an unbalance (mass × radius) between ``UNBALANCE_UNITS``.

    Parameters
    ----------
    value : float
        Unbalance in ``from_unit``; any finite number.
    from_unit, to_unit : str
        One of ``"g·mm"``, ``"g·cm"``, ``"kg·m"``, ``"g·in"``, ``"oz·in"``.

    Returns
    -------
    float
        ``value · f(from_unit) / f(to_unit)`` with f the factor to g·mm:
        1 oz·in = 28.349523125 g × 25.4 mm = 720.077887375 g·mm (1959 agreement).

    Raises
    ------
    BalancingInputError
        ``value`` not finite (field ``"value"``) or unknown unit (field
        ``"from_unit"`` / ``"to_unit"``).
    """
    return _convert(value, from_unit, to_unit, _UNBALANCE_TO_GMM)


def convert_mass(value: float, from_unit: str, to_unit: str) -> float:
    """Convert a mass between ``MASS_UNITS`` (g, kg, oz, lb).

    1 lb = 453.59237 g and 1 oz = 28.349523125 g exactly (1959 agreement).
    Errors as in :func:`convert_unbalance`.
    """
    return _convert(value, from_unit, to_unit, _MASS_TO_G)


def convert_speed(value: float, from_unit: str, to_unit: str) -> float:
    """Convert a rotational speed between ``SPEED_UNITS`` (rpm, Hz, rad/s).

    ``Ω [rad/s] = 2π · n [rpm] / 60 = 2π · f [Hz]`` (1 rev = 2π rad).
    Errors as in :func:`convert_unbalance`.
    """
    return _convert(value, from_unit, to_unit, _SPEED_TO_RAD_S)


def convert_length(value: float, from_unit: str, to_unit: str) -> float:
    """Convert a length between ``LENGTH_UNITS`` (mm, in); 1 in = 25.4 mm exactly.

    Errors as in :func:`convert_unbalance`.
    """
    return _convert(value, from_unit, to_unit, _LENGTH_TO_MM)


def rpm_to_rad_s(speed_rpm: float) -> float:
    """Angular speed ``Ω = 2π·n/60`` in rad/s for ``n`` in rpm (no rounded 0.1047)."""
    return finite("speed_rpm", speed_rpm) * 2.0 * math.pi / 60.0
