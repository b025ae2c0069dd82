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
from shopapp.core.display import plain, typed
from shopapp.models import Correction, RotorType

DEFAULT_DRILL_DIAMETER_MM = 10.0  # shown drill depth uses this unless the operator picks one
# Our rules for drilling advice (README, "Corrections"):
DEFAULT_DEPTH_DIAMETERS = 3.0  # no depth limit on the rotor type: holes at most 3 × d deep
DEFAULT_WEB_DIAMETERS = 0.5  # no least wall on the rotor type: web of d/2 between holes
MAX_SPREAD_DEG = 90.0  # holes within ±45° of the removal line (cos 45° ≈ 0.71 of each hole counts)
MAX_HOLES = 12


@dataclass(frozen=True)
class PlaneAdvice:
    """Correction advice for one plane.

    ``mass_g``/``angle_deg`` is the ideal correction answering the run (the
    trim when weights are already on): where to act (add there, or remove
    there); ``add_angle_deg`` the equivalent addition (remove = add + 180°).
    ``split`` lists the ideal parts on fixed positions. For an added
    correction ``fit`` says what to fit: beside the weights already on the
    rotor or in place of one of them, split and rounded to the stock weights,
    with the residual the rounding leaves. For a removal ``drill`` holds one
    plan per part (several holes when one would be too deep) or
    ``drill_refusal`` says why none fits; ``notes`` say which assumptions the
    drilling advice uses.
    """

    plane: int
    method: str
    action: str
    mass_g: float
    angle_deg: float
    add_angle_deg: float
    radius_mm: float
    split: tuple[positions.PositionMass, ...] = ()
    drill: tuple[removal.DrillPlan, ...] = ()
    drill_diameter_mm: float | None = None
    warnings: tuple[str, ...] = ()
    fit: positions.TrimPlan | None = None
    on_rotor: tuple[positions.WeightOnRotor, ...] = ()
    drill_refusal: str = ""
    notes: tuple[str, ...] = ()

    @property
    def unbalance_gmm(self) -> float:
        return self.mass_g * self.radius_mm

    def record_parts(self) -> tuple[tuple[int | None, float, float], ...]:
        """``(position, angle_deg, mass_g)`` of what the operator is advised to fit or remove."""
        if self.fit is not None:
            return tuple((p.position, p.angle_deg, p.mass_g) for p in self.fit.parts)
        if self.split:
            return tuple((p.position, p.angle_deg, p.mass_g) for p in self.split)
        return ((None, self.angle_deg, self.mass_g),)

    def record_resultant(self) -> tuple[float, float]:
        """Mass and angle of the single weight equivalent to :meth:`record_parts`."""
        total = sum((phasor(m, a) for _, a, m in self.record_parts()), 0j)
        return amplitude_angle(total)

    def split_text(self) -> str:
        """``"3:16, 4:8"`` (position:grams) of the parts to record, empty at a free angle."""
        parts = self.record_parts()
        if any(pos is None for pos, _, _ in parts):
            return ""
        return ", ".join(f"{pos}:{typed(m, 'g')}" for pos, _, m in parts)


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


def removal_density(rt: RotorType) -> tuple[float | None, str]:
    """Density for removal: the rotor type's own figure, else its material's handbook value."""
    if rt.density_g_cm3 is not None:
        return rt.density_g_cm3, f"density {plain(rt.density_g_cm3)} g/cm³ from the rotor type"
    if rt.material is not None and rt.material in removal.DENSITIES:
        d = removal.DENSITIES[rt.material]
        return d.g_cm3, f"density {plain(d.g_cm3)} g/cm³ of {d.material} ({d.source})"
    return None, ""


def drill_limits(rt: RotorType, drill_diameter_mm: float) -> tuple[float, float, str, list[str]]:
    """Depth limit, web, hole direction and the sentences saying where each came from."""
    notes = []
    limits = []
    if rt.max_hole_depth_mm is not None:
        limits.append(rt.max_hole_depth_mm)
    if rt.drill_section_mm is not None and rt.min_wall_mm is not None:
        limits.append(rt.drill_section_mm - rt.min_wall_mm)
    if limits:
        depth = min(limits)
        notes.append(f"holes at most {plain(depth)} mm deep to the tip (rotor type)")
    else:
        depth = DEFAULT_DEPTH_DIAMETERS * drill_diameter_mm
        notes.append(f"no depth limit on the rotor type: holes kept to {plain(depth)} mm "
                     f"({plain(DEFAULT_DEPTH_DIAMETERS)} drill diameters, common practice, no "
                     "source); state the drawing's limit on the rotor type")
    if rt.min_wall_mm is not None:
        web = rt.min_wall_mm
        notes.append(f"at least {plain(web)} mm of wall between neighbouring holes (rotor type)")
    else:
        web = DEFAULT_WEB_DIAMETERS * drill_diameter_mm
        notes.append(f"no least wall on the rotor type: {plain(web)} mm (half the drill) "
                     "between neighbouring holes, common practice, no source")
    if rt.hole_direction is not None:
        direction = rt.hole_direction
    else:
        direction = "axial"
        notes.append("hole direction not stated on the rotor type: taken as axial")
    if direction == "radial":
        notes.append("radial holes from the correction radius: each hole's mass counts at its "
                     "centroid (radius minus about half the depth, the drill point's cone "
                     "included), so more is removed than the bare correction")
    else:
        notes.append("axial holes centred on the correction radius: the mass counts at that "
                     "radius")
    return depth, web, direction, notes


def _drill(plane: int, parts: Sequence[tuple[int | None, float, float]], rt: RotorType,
           radius_mm: float, drill_diameter_mm: float, density: float
           ) -> tuple[tuple[removal.DrillPlan, ...], str, list[str]]:
    """One drill plan per part, or the refusal (with the advice to add mass instead)."""
    depth, web, direction, notes = drill_limits(rt, drill_diameter_mm)
    plans = []
    for position, angle, mass in parts:
        # At a fixed position (a rib, a blade) the holes stay on it: one hole each.
        most = 1 if position is not None else MAX_HOLES
        try:
            plans.append(removal.drill_plan(
                mass, drill_diameter_mm, density, max_depth_mm=depth, radius_mm=radius_mm,
                min_web_mm=web, angle_deg=angle, max_holes=most, direction=direction,
                max_spread_deg=MAX_SPREAD_DEG))
        except BalancingInputError as exc:
            where = f"at position {position}" if position is not None else f"at {plain(angle)}°"
            return (), (f"Plane {plane}: removing {plain(round(mass, 2))} g {where} does not fit "
                        f"the drilling limits ({exc.message}). Add mass opposite instead, or "
                        "use a larger drill."), notes
    return tuple(plans), "", notes


def _in_plane(plane: int, warning: str) -> str:
    """A warning of the numerics (which know no plane) as the page shows it: both planes
    may say the same words, so each names its plane."""
    if warning.startswith("Plane "):
        return warning
    return f"Plane {plane}: {warning[:1].lower()}{warning[1:]}"


def plane_method(rt: RotorType, plane: int) -> str:
    """The rotor type's correction method in ``plane`` (plane 2 takes plane 1's method
    when it has none of its own)."""
    return rt.method_1 if plane == 1 else (rt.method_2 or rt.method_1)


def plane_action(rt: RotorType, plane: int) -> str:
    """``"remove"`` or ``"add"``: what a correction in ``plane`` does by default."""
    return "remove" if plane_method(rt, plane) == "remove" else "add"


def plane_advice(
    plane: int, vector_g: complex, rt: RotorType, radius_mm: float, drill_diameter_mm: float,
    on_rotor: Sequence[positions.WeightOnRotor] = (),
) -> PlaneAdvice:
    """Advice for one plane answering the vector ``vector_g`` (grams at R, an addition).

    ``on_rotor``: weights already fitted in the plane (grams at R); an added
    correction is merged with one of them when close (:func:`positions.plan_trim`).
    """
    method = plane_method(rt, plane)
    mass, add_angle = amplitude_angle(vector_g)
    action = plane_action(rt, plane)
    angle = normalize_deg(add_angle + 180.0) if action == "remove" else add_angle
    warnings: list[str] = []
    count = rt.positions_1 if plane == 1 else rt.positions_2
    first = rt.first_position_1_deg if plane == 1 else rt.first_position_2_deg
    fixed = count if count is not None and count >= 3 else None
    split: tuple[positions.PositionMass, ...] = ()
    if count is not None and mass > 0.0:
        if count < 3:
            warnings.append(f"Plane {plane}: {count} fixed positions cannot hold a correction "
                            "between them; fit it at the computed angle.")
        else:
            res = positions.split_to_positions(mass, angle, count, first)
            split = res.parts
            warnings.extend(_in_plane(plane, w) for w in res.warnings)
    fit = None
    if action == "add" and mass > 0.0:
        fit = positions.plan_trim(vector_g, on_rotor, positions=fixed, first_position_deg=first,
                                  available_g=rt.stock_weights_g or None)
        warnings.extend(w for w in (_in_plane(plane, x) for x in fit.warnings)
                        if w not in warnings)
    drill: tuple[removal.DrillPlan, ...] = ()
    refusal = ""
    notes: list[str] = []
    if action == "remove" and mass > 0.0:
        density, density_note = removal_density(rt)
        if density is None:
            warnings.append(f"Plane {plane}: no material density or material on the rotor "
                            "type, so no drill depth is computed.")
        else:
            parts = ([(p.position, p.angle_deg, p.mass_g) for p in split] if split
                     else [(None, angle, mass)])
            drill, refusal, notes = _drill(plane, parts, rt, radius_mm, drill_diameter_mm,
                                           density)
            notes.insert(0, density_note)
            for d in drill:
                warnings.extend(w for w in (_in_plane(plane, x) for x in d.warnings)
                                if w not in warnings)
    if method == "both":
        warnings.append(f"Plane {plane} allows adding or removing: removing the same mass at "
                        f"{normalize_deg(add_angle + 180.0):.0f}° (internal) works as well.")
    return PlaneAdvice(plane, method, action, mass, angle, add_angle, radius_mm, split, drill,
                       drill_diameter_mm if (drill or refusal) else None, tuple(warnings), fit,
                       tuple(on_rotor), refusal, tuple(notes))


def _vector_g(c: Correction, radius_mm: float) -> complex:
    """A recorded correction as grams at ``radius_mm``, as an addition (remove θ = add θ+180°)."""
    scale = c.radius_mm / radius_mm
    flip = 180.0 if c.action == "remove" else 0.0
    if c.split:
        return sum((phasor(float(part["mass_g"]) * scale, float(part["angle_deg"]) + flip)
                    for part in c.split), 0j)
    return phasor(c.mass_g * scale, c.angle_deg + flip)


def weights_on_rotor(corrections: Sequence[Correction], plane: int, radius_mm: float
                     ) -> tuple[positions.WeightOnRotor, ...]:
    """The added weights of a plane still on the rotor: recorded, not replaced since."""
    replaced = {c.replaces_correction_id for c in corrections if c.replaces_correction_id}
    return tuple(positions.WeightOnRotor(c.id, _vector_g(c, radius_mm)) for c in corrections
                 if c.plane == plane and c.action == "add" and c.id not in replaced)


def applied_vector_g(corrections: Sequence[Correction], plane: int, radius_mm: float,
                     every: Sequence[Correction] = ()) -> complex:
    """What the corrections changed in a plane, as grams at the plane's radius R.

    A removal at θ counts as an addition at θ + 180°; parts fitted on fixed
    positions (``split``) are summed when recorded, otherwise the single mass.
    A weight fitted in place of an earlier one counts less the one taken off
    (looked up in ``every``, the job's corrections).
    """
    by_id = {c.id: c for c in every}
    total = 0j
    for c in corrections:
        if c.plane != plane:
            continue
        total += _vector_g(c, radius_mm)
        old = by_id.get(c.replaces_correction_id) if c.replaces_correction_id else None
        if old is not None:
            total -= _vector_g(old, radius_mm)
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
