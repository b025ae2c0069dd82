"""Phasors: amplitude/angle pairs as complex numbers.

Convention of the whole core: an unbalance, a reading or a correction mass is
the complex number ``amplitude * exp(i * angle)``, the angle in degrees measured
*in the direction of rotation* from the shaft's reference mark. How angles are
shown (with or against rotation, which zero) is converted at the edges with
:func:`to_display_deg` / :func:`from_display_deg`. Removing mass at angle θ has
the same effect as adding it at θ + 180° (:func:`removal_angle_deg`).
"""

from __future__ import annotations

import cmath
import math

import numpy as np

from shopapp.balancing.checks import finite, non_negative
from shopapp.balancing.errors import BalancingInputError

ANGLE_SENSES = ("with_rotation", "against_rotation")


def phasor(amplitude: float, angle_deg: float, *, field: str = "reading") -> complex:
    """Return ``amplitude * exp(i * radians(angle_deg))``.

    Parameters
    ----------
    amplitude : float
        Magnitude, >= 0, in any consistent unit.
    angle_deg : float
        Angle in degrees in the direction of rotation.
    field : str
        Field name used in error messages.
    """
    amp = non_negative(f"{field}.amplitude", amplitude)
    ang = finite(f"{field}.angle_deg", angle_deg)
    return cmath.rect(amp, math.radians(ang))


def amplitude_angle(value: complex) -> tuple[float, float]:
    """Return ``(abs(value), angle_deg)`` with the angle normalised to [0, 360)."""
    # math.atan2, not cmath.phase: the latter raises OverflowError on a subnormal
    # imaginary part (an angle of ~1e-160 degrees), the former just returns ~0.
    return abs(value), normalize_deg(math.degrees(math.atan2(value.imag, value.real)))


def normalize_deg(angle_deg: float) -> float:
    """Map any finite angle in degrees onto [0, 360)."""
    out = math.fmod(angle_deg, 360.0)
    if out < 0.0:
        out += 360.0
    # fmod of e.g. -1e-17 gives 360.0 after the shift; fold it back.
    return 0.0 if out >= 360.0 else out


def normalize_deg_array(angle_deg: np.ndarray) -> np.ndarray:
    """Vectorised :func:`normalize_deg`."""
    out = np.mod(angle_deg, 360.0)
    return np.where(out >= 360.0, 0.0, out)


def removal_angle_deg(add_angle_deg: float) -> float:
    """Angle at which to *remove* mass to get the effect of adding it at ``add_angle_deg``."""
    return normalize_deg(finite("angle_deg", add_angle_deg) + 180.0)


def to_display_deg(
    angle_deg: float, *, sense: str = "with_rotation", zero_deg: float = 0.0
) -> float:
    """Convert an internal angle to the shop's display convention.

    ``sense`` is ``"with_rotation"`` (angles grow in the direction of rotation,
    the internal convention) or ``"against_rotation"``; ``zero_deg`` is where the
    shop's zero lies, measured internally from the reference mark.
    """
    if sense not in ANGLE_SENSES:
        raise BalancingInputError("angle_sense", f"must be one of {', '.join(ANGLE_SENSES)}")
    rel = finite("angle_deg", angle_deg) - finite("zero_deg", zero_deg)
    return normalize_deg(rel if sense == "with_rotation" else -rel)


def from_display_deg(
    display_deg: float, *, sense: str = "with_rotation", zero_deg: float = 0.0
) -> float:
    """Inverse of :func:`to_display_deg`."""
    if sense not in ANGLE_SENSES:
        raise BalancingInputError("angle_sense", f"must be one of {', '.join(ANGLE_SENSES)}")
    d = finite("angle_deg", display_deg)
    rel = d if sense == "with_rotation" else -d
    return normalize_deg(rel + finite("zero_deg", zero_deg))
