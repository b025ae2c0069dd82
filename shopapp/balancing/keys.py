"""Key convention: the mass of a key, its unbalance and the compensating correction.

A keyed shaft and the part keyed to it (a hub: pulley, coupling half, fan
wheel) are usually balanced apart; the key belongs to neither, so the shops
must agree where it is counted. ISO 21940-32 (formerly ISO 8821) names the
conventions — from memory of the standard, its exact wording not reproduced:

* **half-key** — the shaft is balanced with a half-key in its keyway and the
  hub with a half-key in its own; assembled with the full key, the two halves
  make the key. "Half-key" is taken here as half the full key's mass at the
  same radius (half its unbalance);
* **full-key** — the shaft is balanced with the full key fitted, the hub
  without a key;
* **none** — no keyway (or no key convention applies).

Compensation when the key's length differs from the hub's (half-key
convention), from first principles: the shaft balanced with half of the real
key (length ``L_key``, its keyway filled along the key) is off by
``−½·U(L_key)`` without it; the hub balanced with a half-key along its own
length ``L_hub`` is off by ``−½·U(L_hub)``. Assembled with the full key the
rotor is left with

``ΔU = U(L_key) − ½·U(L_key) − ½·U(L_hub) = ½·ρ·b·h·(L_key − L_hub)·r_key``

at the key's angle: the half-key piece of length ``L_key − L_hub`` that
neither balance saw (a key longer than the hub) or that both counted but is not
there (a shorter key, ΔU < 0). The compensating correction is ``|ΔU|`` at the
correction radius, at the key's angle + 180° when the key is longer (or
removed at the key's angle — the same effect), and at the key's angle when
shorter. With the full-key convention the key is wholly in the shaft's
balance and no compensation is due. The key is taken as a rectangular block
``b × h × L`` of uniform density at the radius of its centroid; rounded
(feather-key) ends remove ``(1 − π/4)·b²·h`` of volume.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from shopapp.balancing.checks import finite, positive
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.numtext import short
from shopapp.balancing.phasors import normalize_deg

KEY_CONVENTIONS = ("none", "half_key", "full_key")
# Handbook value for carbon steel (common engineering handbooks give 7.85 g/cm³).
STEEL_DENSITY_G_CM3 = 7.85

CONVENTION_STATEMENTS: dict[str, str] = {
    "none": "No key convention: the rotor has no keyway, or was balanced without a key "
    "and none is fitted in service.",
    "half_key": "Balanced to the half-key convention (ISO 21940-32): a half-key was in the "
    "keyway during balancing; the mating part must be balanced with a half-key too.",
    "full_key": "Balanced to the full-key convention (ISO 21940-32): the full key was fitted "
    "during balancing; the mating part must be balanced without a key.",
}


@dataclass(frozen=True)
class KeyCompensation:
    """Result of :func:`key_compensation`.

    ``piece_length_mm`` is ``L_key − L_hub`` (negative when the key is shorter);
    ``unbalance_gmm`` is the signed ``ΔU`` at the key's angle; the correction is
    ``correction_mass_g`` *added* at ``correction_angle_deg`` and ``correction_radius_mm``
    (0 g when none is due).
    """

    convention: str
    key_mass_g: float
    half_key_mass_g: float
    key_unbalance_gmm: float
    piece_length_mm: float
    piece_mass_g: float
    unbalance_gmm: float
    correction_mass_g: float
    correction_angle_deg: float | None
    correction_radius_mm: float
    statement: str
    notes: tuple[str, ...]


def key_mass_g(
    width_mm: float,
    height_mm: float,
    length_mm: float,
    *,
    density_g_cm3: float = STEEL_DENSITY_G_CM3,
    rounded_ends: bool = False,
) -> float:
    """Mass of a key, ``m = ρ · b · h · L`` (g), rectangular block.

    With ``rounded_ends`` the two semicircular ends of diameter ``b`` replace
    square ends: ``V = b·h·L − (1 − π/4)·b²·h`` (first principles).

    Parameters
    ----------
    width_mm, height_mm, length_mm : float
        Key width ``b``, height ``h`` and length ``L``, mm, > 0.
    density_g_cm3 : float
        Key material density, g/cm³ (steel 7.85).
    rounded_ends : bool
        Feather key with rounded ends (then ``L >= b``).
    """
    b = positive("key_width_mm", width_mm)
    h = positive("key_height_mm", height_mm)
    length = positive("key_length_mm", length_mm)
    rho = positive("key_density_g_cm3", density_g_cm3)
    volume_mm3 = b * h * length
    if rounded_ends:
        if length < b:
            raise BalancingInputError(
                "key_length_mm",
                f"a key with rounded ends must be at least its width ({short(b)} mm)",
            )
        volume_mm3 -= (1.0 - math.pi / 4.0) * b * b * h
    return rho * volume_mm3 / 1000.0  # mm³ → cm³


def key_unbalance_gmm(mass_g: float, radius_mm: float) -> float:
    """Unbalance of a key, ``U = m · r`` (g·mm), ``r`` the radius of its centroid."""
    return positive("key_mass_g", mass_g) * positive("key_radius_mm", radius_mm)


def key_compensation(
    convention: str,
    *,
    key_width_mm: float,
    key_height_mm: float,
    key_length_mm: float,
    hub_length_mm: float,
    key_radius_mm: float,
    correction_radius_mm: float,
    key_angle_deg: float = 0.0,
    density_g_cm3: float = STEEL_DENSITY_G_CM3,
) -> KeyCompensation:
    """Compensating correction for a key whose length differs from the hub's.

    Half-key convention: ``ΔU = ½ · ρ · b · h · (L_key − L_hub) · r_key`` at
    the key's angle; correction ``m = |ΔU| / r_c`` added at the key's angle +
    180° (ΔU > 0) or at the key's angle (ΔU < 0). Full-key: none due. From
    first principles, see the module docstring; convention names from memory
    of ISO 21940-32.

    Parameters
    ----------
    convention : {"none", "half_key", "full_key"}
    key_width_mm, key_height_mm, key_length_mm : float
        Key size, mm.
    hub_length_mm : float
        Length of the hub keyed to the shaft, mm.
    key_radius_mm : float
        Radius of the key's centroid from the axis, mm.
    correction_radius_mm : float
        Radius at which the compensating mass goes, mm.
    key_angle_deg : float
        Angle of the keyway from the reference mark, degrees.
    density_g_cm3 : float
        Key material density, g/cm³.
    """
    if convention not in KEY_CONVENTIONS:
        raise BalancingInputError(
            "key_convention", f"must be one of {', '.join(KEY_CONVENTIONS)}, got {convention!r}"
        )
    if convention == "none":
        raise BalancingInputError(
            "key_convention", "no key convention is set: there is no key to compensate"
        )
    mass = key_mass_g(key_width_mm, key_height_mm, key_length_mm, density_g_cm3=density_g_cm3)
    hub = positive("hub_length_mm", hub_length_mm)
    radius = positive("key_radius_mm", key_radius_mm)
    r_c = positive("correction_radius_mm", correction_radius_mm)
    key_angle = normalize_deg(finite("key_angle_deg", key_angle_deg))
    piece_mm = key_length_mm - hub
    # Mass of the full-section key per mm of length, g/mm.
    per_mm = mass / key_length_mm
    notes: list[str] = []
    if convention == "half_key":
        piece_mass = 0.5 * per_mm * piece_mm
        delta_u = piece_mass * radius
        if piece_mm > 0:
            notes.append(
                f"The key is {short(piece_mm)} mm longer than the hub: half of that length of key "
                "is in neither part's balance."
            )
        elif piece_mm < 0:
            notes.append(
                f"The key is {short(-piece_mm)} mm shorter than the hub: the hub's balance counted "
                "half a key where there is none."
            )
    else:
        piece_mass = 0.0
        delta_u = 0.0
        notes.append("Full-key convention: the whole key is in the shaft's balance.")
    correction = abs(delta_u) / r_c
    if correction == 0.0:
        angle: float | None = None
    else:
        angle = normalize_deg(key_angle + 180.0) if delta_u > 0 else key_angle
    return KeyCompensation(
        convention=convention,
        key_mass_g=mass,
        half_key_mass_g=0.5 * mass,
        key_unbalance_gmm=mass * radius,
        piece_length_mm=piece_mm,
        piece_mass_g=piece_mass,
        unbalance_gmm=delta_u,
        correction_mass_g=correction,
        correction_angle_deg=angle,
        correction_radius_mm=r_c,
        statement=CONVENTION_STATEMENTS[convention],
        notes=tuple(notes),
    )
