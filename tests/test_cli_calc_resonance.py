"""``shopapp calc run-up`` and ``shopapp calc loose-mass``: keys of issue 16, values
checked against textbook formulas, and one-line errors without a traceback.

Sources: the Jeffcott rotating-unbalance response X/Q = r²/(1 − r² + 2iζr) and the
quality factor Q = 1/(2ζ) (Rao, *Mechanical Vibrations* — from memory); the
API 684/617-style margin rule (from memory); the two-ball balanced positions
180° ± arccos(U/(2mR)) (Thearle 1950 — from memory); automatic balancers settle
only above the support's natural frequency (Thearle 1950; Chung & Ro 1999 — from
memory).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner

from shopapp.cli.calc import KINDS, calc_command


def _call(kind: str, request: object) -> tuple[int, str, str]:
    text = request if isinstance(request, str) else json.dumps(request)
    result = CliRunner().invoke(calc_command, [kind, "--json"], input=text)
    return result.exit_code, result.stdout, result.stderr


def _ok(kind: str, request: object) -> dict:
    code, out, err = _call(kind, request)
    assert code == 0, err
    return json.loads(out)


NC_RPM, ZETA = 2400.0, 0.04
Q = 25.0 * np.exp(1j * np.radians(120.0))
RUNOUT = 4.0 * np.exp(1j * np.radians(300.0))


def _response(speed_rpm: float) -> complex:
    """Textbook Jeffcott rotating-unbalance response plus runout (Rao — from memory)."""
    r = speed_rpm / NC_RPM
    return complex(Q * r * r / (1.0 - r * r + 2j * ZETA * r) + RUNOUT)


def _pa(z: complex) -> dict:
    return {"amplitude": abs(z), "angle_deg": math.degrees(math.atan2(z.imag, z.real))}


RUN_UP = {
    "points": [{"speed_rpm": s, **_pa(_response(s))} for s in np.linspace(600.0, 4800.0, 85)],
    "slow_roll": _pa(_response(100.0)),
    "operating_speed_rpm": 3000.0,
}


def test_run_up_keys_and_values() -> None:
    out = _ok("run-up", RUN_UP)
    assert {
        "critical_speed_rpm",
        "damping_ratio",
        "amplification_factor",
        "separation_margin_pct",
        "required_margin_pct",
        "warnings",
    } <= out.keys()
    # The slow roll at 100 rpm still carries (100/2400)² of the response: tiny bias.
    assert out["critical_speed_rpm"] == pytest.approx(NC_RPM, rel=1e-3)
    assert out["damping_ratio"] == pytest.approx(ZETA, rel=0.02)
    assert out["amplification_factor"] == pytest.approx(1.0 / (2.0 * ZETA), rel=0.02)
    # Margin in percent of the operating speed.
    assert out["separation_margin_pct"] == pytest.approx(100.0 * 600.0 / 3000.0, rel=1e-2)
    # API 684/617 style (from memory): SM = 17·(1 − 1/(AF − 1.5)) below the operating speed.
    af = out["amplification_factor_half_power"]
    assert af == pytest.approx(12.5, rel=0.1)
    assert out["required_margin_pct"] == pytest.approx(17.0 * (1.0 - 1.0 / (af - 1.5)))
    assert out["margin_ok"] is True  # 20 % > ~15.3 %
    assert len(out["peaks"]) == 1 and out["peaks"][0]["bracketed"] is True
    assert out["cautions"]


def test_run_up_with_operating_range_and_curves() -> None:
    req = dict(RUN_UP, operating_speed_rpm=None, operating_range_rpm=[2600.0, 3200.0], curves=True)
    out = _ok("run-up", req)
    # Critical below the range: margin relative to its lower end.
    assert out["separation_margin_pct"] == pytest.approx(100.0 * 200.0 / 2600.0, rel=2e-2)
    assert out["margin_ok"] is False
    fitted = out["curves"]["fitted"][0]
    assert len(fitted["speed_rpm"]) == len(fitted["amplitude"]) == len(fitted["angle_deg"])
    assert len(out["curves"]["measured"]["speed_rpm"]) == 85


def test_run_up_one_sided_record_warns() -> None:
    req = dict(RUN_UP, points=RUN_UP["points"][:20])  # up to 1600 rpm, all below the peak
    out = _ok("run-up", req)
    assert any("bracket" in w for w in out["warnings"])
    assert math.isfinite(out["critical_speed_rpm"])


BENCH = {
    "rotor_mass_kg": 10.0,
    "unbalance_gmm": 2000.0,
    "natural_frequency_hz": 20.0,
    "damping_ratio": 0.05,
    "ball_count": 2,
    "ball_mass_g": 50.0,
    "race_radius_mm": 50.0,
    "drag_ratio": 0.05,
    "speed_rpm": 3000.0,
    "ramp_time_s": 2.0,
    "hold_time_s": 3.0,
}


def test_loose_mass_keys_and_values() -> None:
    out = _ok("loose-mass", BENCH)
    assert {
        "capacity_ok",
        "ball_angles_deg",
        "balanced_state_stable",
        "stable_band_rpm",
        "settle_time_s",
        "residual_gmm",
        "warnings",
    } <= out.keys()
    assert out["capacity_ok"] is True
    half = math.degrees(math.acos(2000.0 / (2.0 * 50.0 * 50.0)))  # Thearle, from memory
    assert sorted(out["ball_angles_deg"]) == pytest.approx([180.0 - half, 180.0 + half])
    assert out["balanced_state_stable"] is True
    (lo, hi), *rest = out["stable_band_rpm"]
    assert rest == [] and 1200.0 < lo < 1.6 * 1200.0 and hi >= 3000.0
    assert out["settle_time_s"] is not None and out["residual_gmm"] < 20.0
    assert out["whirl_end_um"] < 0.01 * out["whirl_without_balancer_um"]


def test_loose_mass_with_stiffness_and_below_resonance() -> None:
    req = dict(BENCH, natural_frequency_hz=None, stiffness_n_per_m=2.0e5, speed_rpm=800.0)
    out = _ok("loose-mass", req)
    # Definition: ω_n = √(k / (M + n·m)), loose masses included.
    assert out["natural_frequency_hz"] == pytest.approx(math.sqrt(2.0e5 / 10.1) / (2 * math.pi))
    assert out["balanced_state_stable"] is False
    assert any("not stable" in w for w in out["warnings"])


def test_loose_mass_from_eccentricity() -> None:
    req = dict(BENCH, unbalance_gmm=None, eccentricity_um=150.0, hold_time_s=1.0)
    assert _ok("loose-mass", req)["unbalance_gmm"] == pytest.approx(1500.0)  # U = M·ε


def test_loose_mass_capacity_too_small() -> None:
    out = _ok("loose-mass", dict(BENCH, ball_mass_g=5.0, hold_time_s=1.0))
    assert out["capacity_ok"] is False
    assert out["balanced_state_stable"] is None
    assert out["stable_band_rpm"] == []
    assert any("capacity" in w for w in out["warnings"])


def test_both_kinds_are_listed_in_help() -> None:
    assert {"run-up", "loose-mass"} <= KINDS.keys()
    result = CliRunner().invoke(calc_command, ["--help"])
    assert "run-up" in result.stdout and "loose-mass" in result.stdout


BAD = [
    ("run-up", {"points": [{"speed_rpm": 3000, "amplitude": 1, "angle_deg": 0}]}, "points"),
    ("run-up", {}, "points"),
    ("run-up", {"points": "many"}, "points"),
    (
        "run-up",
        dict(RUN_UP, points=[dict(RUN_UP["points"][0], speed_rpm=0), *RUN_UP["points"][1:]]),
        "points[0].speed_rpm",
    ),
    (
        "run-up",
        dict(RUN_UP, points=[*RUN_UP["points"][:3], {"speed_rpm": 2000, "amplitude": "ten"}]),
        "points[3].amplitude",
    ),
    (
        "run-up",
        dict(RUN_UP, points=[*RUN_UP["points"][:3], {"speed_rpm": 2000, "amplitude": -1}]),
        "points[3].amplitude",
    ),
    ("run-up", dict(RUN_UP, slow_roll={"amplitude": 1}), "slow_roll.angle_deg"),
    ("run-up", dict(RUN_UP, operating_speed_rpm=-3000), "operating_speed_rpm"),
    ("run-up", dict(RUN_UP, operating_range_rpm="fast"), "operating_range_rpm"),
    ("run-up", dict(RUN_UP, curves="yes"), "curves"),
    (
        "run-up",
        {"points": [{"speed_rpm": 1000, "amplitude": 1, "angle_deg": 0}] * 6},
        "points",
    ),
    ("loose-mass", dict(BENCH, rotor_mass_kg=0), "rotor_mass_kg"),
    ("loose-mass", dict(BENCH, unbalance_gmm=None), "unbalance_gmm"),
    ("loose-mass", dict(BENCH, rotor_mass_kg=-5), "rotor_mass_kg"),
    ("loose-mass", dict(BENCH, race_radius_mm=-50), "race_radius_mm"),
    ("loose-mass", dict(BENCH, ball_mass_g=0), "ball_mass_g"),
    (
        "loose-mass",
        dict(BENCH, natural_frequency_hz=None, stiffness_n_per_m=0),
        "stiffness_n_per_m",
    ),
    ("loose-mass", dict(BENCH, stiffness_n_per_m=1e5), "natural_frequency_hz"),
    ("loose-mass", dict(BENCH, ball_count=2.5), "ball_count"),
    ("loose-mass", dict(BENCH, speed_rpm=0), "speed_rpm"),
    ("loose-mass", dict(BENCH, drag_ratio="low"), "drag_ratio"),
    ("loose-mass", '{"rotor_mass_kg": NaN}', "rotor_mass_kg"),
]


@pytest.mark.parametrize(("kind", "request_", "field"), BAD)
def test_bad_input_one_line_no_traceback(kind, request_, field) -> None:
    code, out, err = _call(kind, request_)
    assert code == 2
    assert out == ""
    assert err.count("\n") == 1 and err.endswith("\n")
    assert err.startswith(f"error: {field}: ")
    assert "Traceback" not in err
