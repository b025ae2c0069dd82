"""``shopapp calc run-up`` and ``shopapp calc loose-mass``: resonance as a working tool.

Registered into :data:`shopapp.cli.calc.KINDS`. The numerics live in
:mod:`shopapp.balancing.runup` and :mod:`shopapp.balancing.loose_mass`; they pull
in scipy's solvers, so they are imported when a request arrives, not when the
``shopapp`` command starts. Key names are an interface: add keys, never rename.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import asdict
from typing import Any

from shopapp.balancing.errors import BalancingInputError
from shopapp.core.calc.input import (
    Request,
    Response,
    as_list,
    as_number,
    as_object,
    integer,
    number,
    opt_number,
    path,
    reading,
    renamed_fields,
    require,
    text,
)


def _flag(req: Request, key: str) -> bool:
    value = req.get(key, False)
    if not isinstance(value, bool):
        raise BalancingInputError(key, "must be true or false")
    return value


def _points(req: Request) -> tuple[list[float], list[float], list[float]]:
    items = as_list(require(req, "points"), "points")
    speeds, amps, angles = [], [], []
    for k, item in enumerate(items):
        field = path("points", k)
        obj = as_object(item, field)
        speed = number(obj, "speed_rpm", field)
        amp = number(obj, "amplitude", field)
        if speed <= 0.0:
            raise BalancingInputError(f"{field}.speed_rpm", "must be greater than zero")
        if amp < 0.0:
            raise BalancingInputError(f"{field}.amplitude", "must not be negative")
        speeds.append(speed)
        amps.append(amp)
        angles.append(number(obj, "angle_deg", field))
    return speeds, amps, angles


def _peak(p: Any) -> Response:
    band = p.half_power
    return {
        "critical_speed_rpm": p.critical_speed_rpm,
        "damping_ratio": p.damping_ratio,
        "amplification_factor": p.amplification_factor,
        "amplification_factor_half_power": p.amplification_factor_half_power,
        "half_power_speeds_rpm": (
            None if band is None else [band.lower_speed_rpm, band.upper_speed_rpm]
        ),
        "fitted_peak_speed_rpm": p.fitted_peak_speed_rpm,
        "measured_peak_speed_rpm": p.measured_peak_speed_rpm,
        "measured_peak_amplitude": p.measured_peak_amplitude,
        "separation_margin_pct": p.separation_margin_pct,
        "required_margin_pct": p.required_margin_pct,
        "required_margin_basis": p.required_margin_basis,
        "margin_ok": p.margin_ok,
        "critical_above_operating": p.critical_above_operating,
        "fit_residual_pct": p.fit_residual_pct,
        "unbalance_response": p.unbalance_response,
        "offset": p.offset,
        "bracketed": p.bracketed,
        "speed_range_rpm": list(p.speed_range_rpm),
        "points": p.points,
        "warnings": list(p.warnings),
    }


def calc_run_up(req: Request) -> Response:
    """Critical speed, damping, amplification factor and separation margin from a run-up."""
    from shopapp.balancing import runup  # scipy: imported on use

    speeds, amps, angles = _points(req)
    slow_roll = None if req.get("slow_roll") is None else reading(req["slow_roll"], "slow_roll")
    span = None
    if req.get("operating_range_rpm") is not None:
        items = as_list(req["operating_range_rpm"], "operating_range_rpm")
        span = [as_number(v, path("operating_range_rpm", k)) for k, v in enumerate(items)]
    with renamed_fields({"speed_rpm": "points", "amplitude": "points", "angle_deg": "points"}):
        res = runup.analyse_runup(
            speeds,
            amps,
            angles,
            slow_roll=slow_roll,
            operating_speed_rpm=opt_number(req, "operating_speed_rpm"),
            operating_range_rpm=span,
            measured=text(req, "measured", "displacement"),
        )
    out: Response = {
        "critical_speed_rpm": res.critical_speed_rpm,
        "damping_ratio": res.damping_ratio,
        "amplification_factor": res.amplification_factor,
        "amplification_factor_half_power": res.amplification_factor_half_power,
        "separation_margin_pct": res.separation_margin_pct,
        "required_margin_pct": res.required_margin_pct,
        "margin_ok": res.margin_ok,
        "fit_residual_pct": res.fit_residual_pct,
        "operating_speed_rpm": res.operating_speed_rpm,
        "operating_range_rpm": res.operating_range_rpm,
        "governing_peak": res.governing,
        "peaks": [_peak(p) for p in res.peaks],
        "warnings": list(res.warnings),
        "cautions": list(res.cautions),
    }
    if _flag(req, "curves"):
        curves = runup.runup_curves(res)
        out["curves"] = {
            "measured": asdict(curves.measured),
            "fitted": [asdict(c) for c in curves.fitted],
        }
    return out


def calc_loose_mass(req: Request) -> Response:
    """Loose-mass (ball or bead) balancer: capacity, positions, stable speeds, settling."""
    from shopapp.balancing import loose_mass  # scipy: imported on use

    balancer = loose_mass.loose_mass_balancer(
        number(req, "rotor_mass_kg"),
        opt_number(req, "unbalance_gmm"),
        eccentricity_um=opt_number(req, "eccentricity_um"),
        damping_ratio=number(req, "damping_ratio"),
        ball_count=integer(req, "ball_count"),
        ball_mass_g=number(req, "ball_mass_g"),
        race_radius_mm=number(req, "race_radius_mm"),
        drag_ratio=number(req, "drag_ratio"),
        natural_frequency_hz=opt_number(req, "natural_frequency_hz"),
        stiffness_n_per_m=opt_number(req, "stiffness_n_per_m"),
        rolling_resistance=opt_number(req, "rolling_resistance") or 0.0,
    )
    res = loose_mass.analyse_loose_mass(
        balancer,
        number(req, "speed_rpm"),
        ramp_time_s=opt_number(req, "ramp_time_s"),
        hold_time_s=opt_number(req, "hold_time_s"),
        max_speed_rpm=opt_number(req, "max_speed_rpm"),
    )
    stab = res.stability
    out: Response = {
        "capacity_ok": res.capacity_ok,
        "capacity_gmm": balancer.capacity_gmm,
        "capacity_ratio": balancer.capacity_ratio,
        "unbalance_gmm": balancer.unbalance_gmm,
        "ball_angles_deg": list(res.ball_angles_deg),
        "balanced_state_stable": res.balanced_state_stable,
        "stable_band_rpm": [list(band) for band in res.stable_band_rpm],
        "scan_limit_rpm": res.scan_limit_rpm,
        "natural_frequency_hz": balancer.natural_frequency_hz,
        "stiffness_n_per_m": balancer.stiffness_n_per_m,
        "speed_ratio": res.speed_ratio,
        "settle_estimate_s": None if stab is None else stab.settle_estimate_s,
        "settle_time_s": res.settle_time_s,
        "residual_gmm": res.residual_gmm,
        "end_ball_angles_deg": list(res.simulation.end_ball_angles_deg),
        "whirl_end_um": res.whirl_end_um,
        "whirl_without_balancer_um": res.whirl_without_balancer_um,
        "dead_band_gmm": res.dead_band_gmm,
        "ramp_time_s": res.simulation.ramp_time_s,
        "hold_time_s": res.simulation.hold_time_s,
        "warnings": list(res.warnings),
        "cautions": list(res.cautions),
    }
    if _flag(req, "curves"):
        out["curves"] = asdict(loose_mass.loose_mass_curves(res))
    return out


RESONANCE_KINDS: dict[str, Callable[[Request], Response]] = {
    "run-up": calc_run_up,
    "loose-mass": calc_loose_mass,
}
