"""Correction advice per plane and, afterwards, how well it was followed.

Per plane: where to add (or remove) the mass the influence coefficients call
for, split onto fixed positions (:mod:`shopapp.balancing.positions`) and, when
removing, the drill depth (:mod:`shopapp.balancing.removal`). Afterwards: the
vector actually fitted in a plane and how far a check run landed from what the
coefficients predicted. Angles are internal degrees; nothing is written.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from shopapp.balancing import positions, removal
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.phasors import amplitude_angle, normalize_deg, phasor
from shopapp.models import Correction, RotorType

DEFAULT_DRILL_DIAMETER_MM = 10.0  # shown drill depth uses this unless the operator picks one


@dataclass(frozen=True)
class PlaneAdvice:
    """Correction advice for one plane.

    ``angle_deg`` is where to act (add there, or remove there); ``add_angle_deg``
    the equivalent addition (remove = add + 180°). ``split`` lists the parts on
    fixed positions, ``drill`` the hole(s) when removing.
    """

    plane: int
    method: str
    action: str
    mass_g: float
    angle_deg: float
    add_angle_deg: float
    radius_mm: float
    split: tuple[positions.PositionMass, ...] = ()
    drill: tuple[removal.HoleDepth, ...] = ()
    drill_diameter_mm: float | None = None
    warnings: tuple[str, ...] = ()

    @property
    def unbalance_gmm(self) -> float:
        return self.mass_g * self.radius_mm

    def split_text(self) -> str:
        """``"3:4.20, 4:1.10"`` (position:grams) for the record form."""
        return ", ".join(f"{p.position}:{p.mass_g:.2f}" for p in self.split)


@dataclass(frozen=True)
class CorrectionAdvice:
    """Advice answering one run (the rotor's latest state)."""

    run_id: int
    run_seq: int
    source: str
    planes: tuple[PlaneAdvice, ...]
    predicted_residual_gmm: tuple[float, ...]
    predicted_pct_of_limit: tuple[float, ...] | None
    warnings: tuple[str, ...]
    cautions: tuple[str, ...]


def plane_advice(
    plane: int, vector_g: complex, rt: RotorType, radius_mm: float, drill_diameter_mm: float
) -> PlaneAdvice:
    method = rt.method_1 if plane == 1 else (rt.method_2 or rt.method_1)
    mass, add_angle = amplitude_angle(vector_g)
    action = "remove" if method == "remove" else "add"
    angle = normalize_deg(add_angle + 180.0) if action == "remove" else add_angle
    warnings: list[str] = []
    count = rt.positions_1 if plane == 1 else rt.positions_2
    first = rt.first_position_1_deg if plane == 1 else rt.first_position_2_deg
    split: tuple[positions.PositionMass, ...] = ()
    if count is not None and mass > 0.0:
        if count < 3:
            warnings.append(f"Plane {plane}: {count} fixed positions cannot hold a correction "
                            "between them; fit it at the computed angle.")
        else:
            res = positions.split_to_positions(mass, angle, count, first)
            split = res.parts
            warnings.extend(res.warnings)
    drill: tuple[removal.HoleDepth, ...] = ()
    if action == "remove" and mass > 0.0:
        if rt.density_g_cm3 is None:
            warnings.append(f"Plane {plane}: no material density on the rotor type, so no "
                            "drill depth is computed.")
        else:
            masses = [p.mass_g for p in split] if split else [mass]
            drill = tuple(removal.drill_depth(m, drill_diameter_mm, rt.density_g_cm3)
                          for m in masses)
            for h in drill:
                warnings.extend(h.warnings)
    if method == "both":
        warnings.append(f"Plane {plane} allows adding or removing: removing the same mass at "
                        f"{normalize_deg(add_angle + 180.0):.0f}° (internal) works as well.")
    return PlaneAdvice(plane, method, action, mass, angle, add_angle, radius_mm, split, drill,
                       drill_diameter_mm if drill else None, tuple(warnings))


def applied_vector_g(corrections: Sequence[Correction], plane: int, radius_mm: float) -> complex:
    """Sum of the corrections fitted in a plane, as grams at the plane's radius R.

    A removal at θ counts as an addition at θ + 180°; parts fitted on fixed
    positions (``split``) are summed when recorded, otherwise the single mass.
    """
    total = 0j
    for c in corrections:
        if c.plane != plane:
            continue
        scale = c.radius_mm / radius_mm
        flip = 180.0 if c.action == "remove" else 0.0
        if c.split:
            for part in c.split:
                total += phasor(float(part["mass_g"]) * scale, float(part["angle_deg"]) + flip)
        else:
            total += phasor(c.mass_g * scale, c.angle_deg + flip)
    return total


def prediction_error_pct(
    matrix: np.ndarray, initial: Sequence[complex], applied_g: Sequence[complex],
    measured: Sequence[complex],
) -> float:
    """How far a check run landed from the prediction, % of the initial reading.

    ``V_pred = V0 + A·W_applied``; error ``= ‖V_pred − V_meas‖ / ‖V0‖ · 100`` with
    ‖·‖ the Euclidean norm over the planes (our definition).
    """
    v0 = np.array(initial, dtype=complex)
    v_pred = v0 + matrix @ np.array(applied_g, dtype=complex)
    norm0 = float(np.linalg.norm(v0))
    if norm0 == 0.0:
        raise BalancingInputError("initial", "the initial reading is zero")
    return float(np.linalg.norm(v_pred - np.array(measured, dtype=complex)) / norm0 * 100.0)
