"""The calculation kinds of ``shopapp calc`` and ``POST /api/v1/calc/<kind>``.

Each kind reads one JSON object (:mod:`shopapp.core.calc.input` names every bad
field in a :class:`~shopapp.balancing.errors.BalancingInputError`), runs one
calculation of :mod:`shopapp.balancing` and answers one JSON-able object. Angles
are degrees in the direction of rotation; masses are at the trial radius unless a
radius is given. The key names are an interface that scripts depend on: add keys,
never rename them. Shared by the CLI and the JSON API, so both answer the same.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable
from typing import Any

import numpy as np

from shopapp.balancing import (
    dynamics,
    influence,
    planes,
    positions,
    removal,
    tolerance,
    verification,
)
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.phasors import amplitude_angle
from shopapp.core.calc.input import Request, Response
from shopapp.core.calc.input import as_list as _list
from shopapp.core.calc.input import as_number as _as_number
from shopapp.core.calc.input import as_object as _object
from shopapp.core.calc.input import integer as _integer
from shopapp.core.calc.input import number as _number
from shopapp.core.calc.input import number_or as _number_or
from shopapp.core.calc.input import opt_number as _opt_number
from shopapp.core.calc.input import path as _path
from shopapp.core.calc.input import reading as _reading
from shopapp.core.calc.input import readings as _readings
from shopapp.core.calc.input import renamed_fields as _fields
from shopapp.core.calc.input import require as _require
from shopapp.core.calc.input import text as _text
from shopapp.core.calc.input import unbalance as _unbalance
from shopapp.core.calc.resonance import RESONANCE_KINDS

# --------------------------------------------------------------------------- response building


def _pa(value: complex, name: str = "amplitude") -> dict[str, float]:
    mag, ang = amplitude_angle(complex(value))
    return {name: mag, "angle_deg": ang}


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, bool | np.bool_):
        return bool(obj)
    if isinstance(obj, int | np.integer):
        return int(obj)
    if isinstance(obj, float | np.floating):
        value = float(obj)
        return value if math.isfinite(value) else None
    if isinstance(obj, complex | np.complexfloating):
        return _pa(complex(obj))
    return obj


# --------------------------------------------------------------------------- kinds


def _tolerance_response(tol: tolerance.Tolerance) -> Response:
    return {
        "method": tol.method,
        "reference": tol.reference,
        "u_per_gmm": tol.u_per_gmm,
        "e_per_um": tol.e_per_um,
        "bearing_a_gmm": tol.bearing_a_gmm,
        "bearing_b_gmm": tol.bearing_b_gmm,
        "plane_1_gmm": tol.plane_1_gmm,
        "plane_2_gmm": tol.plane_2_gmm,
        "static_gmm": tol.static_gmm,
        "couple_moment_gmm2": tol.couple_moment_gmm2,
        "couple_pair_gmm": tol.couple_pair_gmm,
        "layout": tol.layout,
        "allocation_clamped": tol.allocation_clamped,
        "notes": list(tol.notes),
    }


def _plane_verdicts(items: tuple[tolerance.PlaneVerdict, ...] | None) -> list[Response] | None:
    if items is None:
        return None
    return [
        {
            "plane": v.plane,
            "residual_gmm": v.residual_gmm,
            "angle_deg": v.angle_deg,
            "limit_gmm": v.limit_gmm,
            "ratio": v.ratio,
            "passed": v.passed,
        }
        for v in items
    ]


def _geometry(req: Request) -> tolerance.RotorGeometry | None:
    if req.get("geometry") is None:
        return None
    geo = _object(req["geometry"], "geometry")
    with _fields(prefix="geometry."):
        return tolerance.rotor_geometry(
            _number(geo, "bearing_a_mm", "geometry"),
            _number(geo, "bearing_b_mm", "geometry"),
            _number(geo, "centre_of_mass_mm", "geometry"),
            _opt_number(geo, "plane_1_mm", "geometry"),
            _opt_number(geo, "plane_2_mm", "geometry"),
        )


TOLERANCE_METHODS = ("iso21940-11", "4w/n", "customer")


def calc_tolerance(req: Request) -> Response:
    """ISO 21940-11 grade, API-style 4W/N or customer tolerance; optional residual verdict."""
    method = _text(req, "method", "iso21940-11").lower()
    if method == "iso":
        method = "iso21940-11"
    geometry = _geometry(req)
    out: Response
    if method == "iso21940-11":
        grade_value = _require(req, "grade")
        if isinstance(grade_value, bool) or not isinstance(grade_value, int | float | str):
            raise BalancingInputError("grade", 'must be a grade such as 6.3 or "G 6.3"')
        mapping = {"grade_mm_s": "grade"}
        with _fields(mapping):
            grade = tolerance.balance_grade(grade_value)
            tol = tolerance.iso_tolerance(
                grade.grade_mm_s,
                _number(req, "mass_kg"),
                _number(req, "service_speed_rpm"),
                geometry,
            )
        out = _tolerance_response(tol)
        out["grade"] = {
            "grade_mm_s": grade.grade_mm_s,
            "label": grade.label,
            "examples": list(grade.examples),
        }
    elif method == "4w/n":
        with _fields({"rotor_mass_kg": "mass_kg"}):
            tol = tolerance.api_tolerance(
                _number(req, "journal_load_kg"),
                _number(req, "service_speed_rpm"),
                _opt_number(req, "journal_load_b_kg"),
                _opt_number(req, "mass_kg"),
            )
        out = _tolerance_response(tol)
    elif method == "customer":
        tol = tolerance.customer_tolerance(
            _opt_number(req, "plane_1_gmm"),
            _opt_number(req, "plane_2_gmm"),
            mass_g=_opt_number(req, "mass_g"),
            radius_mm=_opt_number(req, "radius_mm"),
        )
        out = _tolerance_response(tol)
    else:
        raise BalancingInputError(
            "method", f"unknown method {method!r}; use one of {', '.join(TOLERANCE_METHODS)}"
        )
    if req.get("residuals") is not None:
        items = _list(req["residuals"], "residuals")
        if len(items) != 2:
            raise BalancingInputError("residuals", "must list the residual of plane 1 and plane 2")
        r1, r2 = (_unbalance(item, f"residuals[{k}]") for k, item in enumerate(items))
        verdict = tolerance.judge_residual(r1, r2, tol, geometry)
        out["verdict"] = {
            "passed": verdict.passed,
            "worst_ratio": verdict.worst_ratio,
            "reference": verdict.reference,
            "bearing_planes": _plane_verdicts(verdict.bearing_planes),
            "correction_planes": _plane_verdicts(verdict.correction_planes),
            # Overhung and narrow rotors: judged with the bearing planes (None otherwise).
            "static_couple": _plane_verdicts(verdict.static_couple),
            "notes": list(verdict.notes),
        }
    return out


def _radius_pair(req: Request) -> tuple[float, float] | None:
    """``trial_radius_mm`` and ``correction_radius_mm`` when a correction is wanted elsewhere."""
    trial_r = _opt_number(req, "trial_radius_mm")
    corr_r = _opt_number(req, "correction_radius_mm")
    if (trial_r is None) != (corr_r is None):
        missing = "trial_radius_mm" if trial_r is None else "correction_radius_mm"
        raise BalancingInputError(missing, "give both radii or neither")
    if trial_r is None or corr_r is None:
        return None
    return trial_r, corr_r


def _at_radius(mass_g: float, radii: tuple[float, float] | None) -> float:
    if radii is None:
        return mass_g
    with _fields({"from_radius_mm": "trial_radius_mm", "to_radius_mm": "correction_radius_mm"}):
        return influence.mass_at_radius(mass_g, radii[0], radii[1])


def calc_single_plane(req: Request) -> Response:
    """Single-plane influence-coefficient correction from one trial run."""
    v0 = _reading(_require(req, "initial"), "initial")
    trial = _object(_require(req, "trial"), "trial")
    v1 = _reading(_require(trial, "reading", "trial"), "trial.reading")
    radii = _radius_pair(req)
    result = influence.single_plane(
        v0,
        _number(trial, "mass_g", "trial"),
        _number(trial, "angle_deg", "trial"),
        v1,
        max_mass_g=_opt_number(req, "max_mass_g"),
    )
    correction: Response = {
        "mass_g": _at_radius(result.correction_mass_g, radii),
        "angle_deg": result.correction_angle_deg,
    }
    if radii is not None:
        correction["radius_mm"] = radii[1]
    return {
        "correction": correction,
        "coefficient_per_g": _pa(result.coefficient),
        "trial_amplitude_change": result.trial_amplitude_change,
        "trial_phase_change_deg": result.trial_phase_change_deg,
        "warnings": list(result.warnings),
    }


def calc_two_plane(req: Request) -> Response:
    """Two-plane influence-coefficient correction from two trial runs."""
    initial = _readings(_require(req, "initial"), "initial")
    trial_items = _list(_require(req, "trials"), "trials")
    trials = []
    for k, item in enumerate(trial_items):
        field = f"trials[{k}]"
        run = _object(item, field)
        trials.append(
            influence.TrialRun(
                plane=_integer(run, "plane", field),
                mass_g=_number(run, "mass_g", field),
                angle_deg=_number(run, "angle_deg", field),
                readings=tuple(_readings(_require(run, "readings", field), f"{field}.readings")),
            )
        )
    radii = _radius_pair(req)
    sol = influence.two_plane(
        initial,
        trials,
        procedure=_text(req, "procedure", "removed"),
        max_mass_g=_opt_number(req, "max_mass_g"),
        tolerance_reading=_opt_number(req, "tolerance_reading"),
    )
    corrections = []
    for c in sol.corrections:
        entry: Response = {
            "plane": c.plane,
            "mass_g": _at_radius(c.mass_g, radii),
            "angle_deg": c.angle_deg,
        }
        if radii is not None:
            entry["radius_mm"] = radii[1]
        corrections.append(entry)
    return {
        "corrections": corrections,
        "condition_number": sol.condition_number,
        "coefficients_per_g": [[_pa(x) for x in row] for row in sol.coefficients],
        "predicted_residual": [_pa(x) for x in sol.predicted_residual],
        "predicted_residual_max": sol.predicted_residual_max,
        "warnings": list(sol.warnings),
    }


def calc_split(req: Request) -> Response:
    """Split a correction onto the two neighbouring fixed positions; optional stock weights."""
    mass = _number(req, "mass_g")
    angle = _number(req, "angle_deg")
    n = _integer(req, "positions")
    first = _number_or(req, "first_position_deg", 0.0)
    result = positions.split_to_positions(mass, angle, n, first)
    out: Response = {
        "parts": [
            {"position": p.position, "angle_deg": p.angle_deg, "mass_g": p.mass_g}
            for p in result.parts
        ],
        "total_mass_g": result.total_mass_g,
        "warnings": list(result.warnings),
    }
    if req.get("available_g") is not None:
        sizes = [
            _as_number(v, f"available_g[{k}]")
            for k, v in enumerate(_list(req["available_g"], "available_g"))
        ]
        per = _integer(req, "max_per_position") if "max_per_position" in req else 2
        choice = positions.choose_weights(mass, angle, n, first, sizes, max_per_position=per)
        out["weights"] = {
            "parts": [
                {
                    "position": p.position,
                    "angle_deg": p.angle_deg,
                    "pieces_g": list(p.pieces_g),
                    "mass_g": p.mass_g,
                }
                for p in choice.parts
            ],
            "residual_mass_g": choice.residual_mass_g,
            "residual_angle_deg": choice.residual_angle_deg,
            "warnings": list(choice.warnings),
        }
    return out


def _density(req: Request) -> float:
    if req.get("density_g_cm3") is not None:
        return _number(req, "density_g_cm3")
    if req.get("material") is not None:
        name = _text(req, "material", "")
        if name not in removal.DENSITIES:
            raise BalancingInputError(
                "material", f"unknown material {name!r}; use one of {', '.join(removal.DENSITIES)}"
            )
        return removal.DENSITIES[name].g_cm3
    raise BalancingInputError("density_g_cm3", "is required (or material)")


def calc_drill(req: Request) -> Response:
    """Depth of a drilled hole for a mass (or the mass for a depth); several holes if needed."""
    diameter = _number(req, "drill_diameter_mm")
    density = _density(req)
    point = _number_or(req, "point_angle_deg", removal.DEFAULT_POINT_ANGLE_DEG)
    if req.get("mass_g") is None and (
        req.get("depth_full_diameter_mm") is not None or req.get("depth_to_tip_mm") is not None
    ):
        mass = removal.drill_mass(
            diameter,
            density,
            depth_full_diameter_mm=_opt_number(req, "depth_full_diameter_mm"),
            depth_to_tip_mm=_opt_number(req, "depth_to_tip_mm"),
            point_angle_deg=point,
        )
        return {
            "mass_g": mass,
            "density_g_cm3": density,
            "cautions": list(removal.DRILLING_CAUTIONS),
        }
    mass = _number(req, "mass_g")
    hole = removal.drill_depth(mass, diameter, density, point_angle_deg=point)
    out: Response = {
        "depth_full_diameter_mm": hole.depth_full_diameter_mm,
        "depth_to_tip_mm": hole.depth_to_tip_mm,
        "point_length_mm": hole.point_length_mm,
        "surface_diameter_mm": hole.surface_diameter_mm,
        "density_g_cm3": density,
        "point_angle_deg": hole.point_angle_deg,
        "warnings": list(hole.warnings),
        "cautions": list(hole.cautions),
    }
    if req.get("max_depth_mm") is not None:
        plan = removal.drill_plan(
            mass,
            diameter,
            density,
            max_depth_mm=_number(req, "max_depth_mm"),
            radius_mm=_number(req, "radius_mm"),
            min_web_mm=_number_or(req, "min_web_mm", 0.0),
            angle_deg=_number_or(req, "angle_deg", 0.0),
            point_angle_deg=point,
            direction=_text(req, "direction", "axial"),
            max_spread_deg=_number_or(req, "max_spread_deg", 180.0),
        )
        out["plan"] = {
            "holes": plan.holes,
            "mass_per_hole_g": plan.mass_per_hole_g,
            "total_removed_g": plan.total_removed_g,
            "depth_full_diameter_mm": plan.depth_full_diameter_mm,
            "depth_to_tip_mm": plan.depth_to_tip_mm,
            "pitch_deg": plan.pitch_deg,
            "hole_angles_deg": list(plan.hole_angles_deg),
            "direction": plan.direction,
            "effective_radius_mm": plan.effective_radius_mm,
            "warnings": list(plan.warnings),
        }
    return out


def _circle_points(
    req: Request, amplitude_key: str
) -> tuple[list[float], list[float], list[float] | None]:
    items = _list(_require(req, "readings"), "readings")
    pos: list[float] = []
    amp: list[float] = []
    ang: list[float] = []
    with_angle = bool(items) and isinstance(items[0], dict) and "angle_deg" in items[0]
    for k, item in enumerate(items):
        field = f"readings[{k}]"
        obj = _object(item, field)
        pos.append(_number(obj, "position_deg", field))
        amp.append(_number(obj, amplitude_key, field))
        if with_angle:
            ang.append(_number(obj, "angle_deg", field))
        elif "angle_deg" in obj:
            raise BalancingInputError(
                f"{field}.angle_deg", "give an angle with every reading or with none"
            )
    return pos, amp, ang if with_angle else None


def _fit(v: verification.ResidualVerification) -> Response:
    return {
        "method": v.method,
        "rms_relative": v.fit_rms_relative,
        "circle_radius": v.circle_radius,
        "sensitivity_per_gmm": v.sensitivity_per_gmm,
        "points": v.points,
    }


def calc_verify_residual(req: Request) -> Response:
    """Residual unbalance from a test unbalance moved round N positions (circle fit)."""
    test = _number(req, "test_unbalance_gmm")
    pos, amp, ang = _circle_points(req, "amplitude")
    v = verification.verify_residual(
        test, pos, amp, ang, permissible_gmm=_opt_number(req, "permissible_gmm")
    )
    return {
        "residual_gmm": v.residual_gmm,
        "angle_deg": v.angle_deg,
        "fit": _fit(v),
        "residual_ratio": v.residual_ratio,
        "test_unbalance_gmm": v.test_unbalance_gmm,
        "permissible_gmm": v.permissible_gmm,
        "within_tolerance": v.within_tolerance,
        "warnings": list(v.warnings),
    }


def calc_static_couple(req: Request) -> Response:
    """Static/couple decomposition (or recombination) and transfer to other planes."""
    z1 = _number(req, "plane_1_mm")
    z2 = _number(req, "plane_2_mm")
    ref = _opt_number(req, "reference_mm")
    if req.get("unbalances") is not None:
        items = _list(req["unbalances"], "unbalances")
        if len(items) != 2:
            raise BalancingInputError(
                "unbalances", "must list the unbalance of plane 1 and plane 2"
            )
        u1, u2 = (_unbalance(item, f"unbalances[{k}]") for k, item in enumerate(items))
    elif req.get("static") is not None:
        s = _unbalance(req["static"], "static")
        c = _unbalance(_require(req, "couple"), "couple")
        # The couple is given as its pair: +C in plane 1, −C in plane 2; moment C·(z1 − z2).
        u1, u2 = planes.recombine(s, c * (z1 - z2), z1, z2, reference_mm=ref)
    else:
        raise BalancingInputError("unbalances", "is required (or static and couple)")
    sc = planes.static_couple(u1, u2, z1, z2, reference_mm=ref)
    out: Response = {
        "static": _pa(sc.static_gmm, "unbalance_gmm"),
        "couple": _pa(sc.couple_pair_gmm, "unbalance_gmm"),
        "couple_moment_gmm2": _pa(sc.couple_moment_gmm2, "moment_gmm2"),
        "static_in_planes": [
            _pa(sc.static_in_plane_1_gmm, "unbalance_gmm"),
            _pa(sc.static_in_plane_2_gmm, "unbalance_gmm"),
        ],
        "unbalances": [_pa(u1, "unbalance_gmm"), _pa(u2, "unbalance_gmm")],
        "reference_mm": sc.reference_mm,
    }
    if req.get("transfer_to") is not None:
        dst = _object(req["transfer_to"], "transfer_to")
        with _fields(
            {"new_plane_1_mm": "transfer_to.plane_1_mm", "new_plane_2_mm": "transfer_to.plane_2_mm"}
        ):
            ua, ub = planes.transfer_planes(
                u1,
                u2,
                z1,
                z2,
                _number(dst, "plane_1_mm", "transfer_to"),
                _number(dst, "plane_2_mm", "transfer_to"),
            )
        out["transferred"] = [_pa(complex(ua), "unbalance_gmm"),
                              _pa(complex(ub), "unbalance_gmm")]
    if req.get("bearings") is not None:
        brg = _object(req["bearings"], "bearings")
        with _fields(prefix="bearings."):
            ua, ub = planes.bearing_plane_equivalents(
                u1,
                u2,
                z1,
                z2,
                _number(brg, "bearing_a_mm", "bearings"),
                _number(brg, "bearing_b_mm", "bearings"),
            )
        out["bearing_planes"] = [_pa(complex(ua), "unbalance_gmm"),
                                 _pa(complex(ub), "unbalance_gmm")]
    return out


def calc_combine(req: Request) -> Response:
    """One mass equivalent to several (vector sum, optionally at another radius)."""
    items = _list(_require(req, "masses"), "masses")
    if not items:
        raise BalancingInputError("masses", "must list at least one mass")
    masses, angles, radii = [], [], []
    for k, item in enumerate(items):
        field = f"masses[{k}]"
        obj = _object(item, field)
        masses.append(_number(obj, "mass_g", field))
        angles.append(_number(obj, "angle_deg", field))
        if obj.get("radius_mm") is not None:
            radii.append(_number(obj, "radius_mm", field))
    if radii and len(radii) != len(masses):
        raise BalancingInputError("masses", "give a radius with every mass or with none")
    to_radius = _opt_number(req, "to_radius_mm")
    if radii and to_radius is None:
        to_radius = radii[0]
    with _fields({"masses_g": "masses", "angles_deg": "masses", "radii_mm": "masses"}):
        result = positions.combine_masses(
            masses, angles, radii_mm=radii or None, to_radius_mm=to_radius if radii else None
        )
    return {"mass_g": result.mass_g, "angle_deg": result.angle_deg, "radius_mm": result.radius_mm}


def _unbalance_list(value: Any, field: str) -> list[complex]:
    items = _list(value, field)
    return [
        complex(_as_number(item, _path(field, k)))
        if not isinstance(item, dict)
        else _unbalance(item, _path(field, k))
        for k, item in enumerate(items)
    ]


def calc_machine_proving(req: Request) -> Response:
    """Proving-rotor tests of a balancing machine: U_mar and/or the reduction ratio."""
    out: Response = {}
    if req.get("readings") is not None:
        test = _number(req, "test_unbalance_gmm")
        pos, amp, ang = _circle_points(req, "indicated_gmm")
        result = verification.minimum_achievable_residual(
            test,
            pos,
            amp,
            ang,
            claimed_umar_gmm=_number(req, "claimed_umar_gmm"),
            rotor_mass_kg=_opt_number(req, "rotor_mass_kg"),
        )
        out.update(
            {
                "umar_gmm": result.umar_gmm,
                "specific_gmm_per_kg": result.specific_gmm_per_kg,
                "claimed_umar_gmm": result.claimed_umar_gmm,
                "umar_passed": result.passed,
                "indication_ratio": result.indication_ratio,
                "fit": _fit(result.fit),
                "umar_warnings": list(result.warnings),
            }
        )
    if req.get("before") is not None:
        before = _unbalance_list(req["before"], "before")
        after = _unbalance_list(_require(req, "after"), "after")
        with _fields({"before_gmm": "before", "after_gmm": "after"}):
            urr = verification.unbalance_reduction_ratio(
                before, after, claimed_urr_percent=_opt_number(req, "claimed_urr_percent")
            )
        out.update(
            {
                "urr_percent": list(urr.urr_percent),
                "min_urr_percent": urr.min_urr_percent,
                "claimed_urr_percent": urr.claimed_urr_percent,
                "urr_passed": urr.passed,
                "urr_warnings": list(urr.warnings),
            }
        )
    if not out:
        raise BalancingInputError(
            "readings", "is required (or before and after for the unbalance reduction ratio)"
        )
    passes = [v for k, v in out.items() if k.endswith("_passed") and v is not None]
    out["passed"] = all(passes) if passes else None
    return out


def calc_rigid_flexible(req: Request) -> Response:
    """Rigid/flexible check; optional balancing-speed advice and Jeffcott response."""
    out: Response = {}
    crit = _opt_number(req, "first_critical_rpm")
    if req.get("service_speed_rpm") is not None or req.get("machine_type") is None:
        check = dynamics.rigid_or_flexible(
            _number(req, "service_speed_rpm"),
            _number(req, "first_critical_rpm"),
            _number_or(req, "threshold", dynamics.FLEXIBLE_SPEED_FRACTION),
        )
        out.update(
            {
                "rigid": check.rigid,
                "speed_ratio": check.speed_ratio,
                "threshold": check.threshold,
                "warnings": list(check.warnings),
            }
        )
    if req.get("machine_type") is not None:
        with _fields({"proposed_speed_rpm": "balancing_speed_rpm"}):
            adv = dynamics.balancing_speed_advice(
                _text(req, "machine_type", ""),
                _number(req, "suspension_resonance_rpm"),
                proposed_speed_rpm=_opt_number(req, "balancing_speed_rpm"),
                max_permitted_speed_rpm=_opt_number(req, "max_permitted_speed_rpm"),
                first_critical_rpm=crit,
            )
        out["balancing_speed"] = {
            "machine_type": adv.machine_type,
            "recommended_min_rpm": adv.recommended_min_rpm,
            "recommended_max_rpm": adv.recommended_max_rpm,
            "balancing_speed_rpm": adv.proposed_speed_rpm,
            "speed_ok": adv.speed_ok,
            "warnings": list(adv.warnings),
            "cautions": list(adv.cautions),
        }
        if adv.proposed_speed_rpm is not None and req.get("damping_ratio") is not None:
            r = adv.proposed_speed_rpm / adv.suspension_resonance_rpm
            resp = dynamics.jeffcott_response(r, _number(req, "damping_ratio"))
            out["jeffcott"] = {
                "speed_ratio": r,
                "amplitude_ratio": resp.amplitude_ratio,
                "phase_lag_deg": resp.phase_lag_deg,
            }
    return out


KINDS: dict[str, Callable[[Request], Response]] = {
    "tolerance": calc_tolerance,
    "single-plane": calc_single_plane,
    "two-plane": calc_two_plane,
    "split": calc_split,
    "drill": calc_drill,
    "verify-residual": calc_verify_residual,
    "static-couple": calc_static_couple,
    "combine": calc_combine,
    "machine-proving": calc_machine_proving,
    "rigid-flexible": calc_rigid_flexible,
    **RESONANCE_KINDS,  # run-up, loose-mass (shopapp/core/calc/resonance.py)
}


# --------------------------------------------------------------------------- one request


def answer(kind: str, request: Any) -> Response:
    """Run calculation ``kind`` on a parsed JSON request; BalancingInputError on bad input."""
    if kind not in KINDS:
        raise BalancingInputError(
            "kind", f"unknown calculation {kind!r}; use one of {', '.join(KINDS)}"
        )
    return _jsonable(KINDS[kind](_object(request, "request")))


def run(kind: str, text: str) -> Response:
    """Run one calculation on a JSON request text; raise BalancingInputError on bad input."""
    if kind not in KINDS:
        raise BalancingInputError(
            "kind", f"unknown calculation {kind!r}; use one of {', '.join(KINDS)}"
        )
    try:
        request = json.loads(text)
    except json.JSONDecodeError as exc:
        raise BalancingInputError(
            "request", f"not valid JSON ({exc.msg} at line {exc.lineno} column {exc.colno})"
        ) from None
    request = _object(request, "request")
    return _jsonable(KINDS[kind](request))
