"""``shopapp calc KIND --json``: key names of issue 3, values checked against
independent models, and one-line errors without a traceback."""

from __future__ import annotations

import cmath
import json
import math

import numpy as np
import pytest
from click.testing import CliRunner
from numpy.testing import assert_allclose

from shopapp.cli.calc import KINDS, calc_command


def _call(kind: str, request: object, *args: str) -> tuple[int, str, str]:
    text = request if isinstance(request, str) else json.dumps(request)
    result = CliRunner().invoke(calc_command, [kind, "--json", *args], input=text)
    return result.exit_code, result.stdout, result.stderr


def _ok(kind: str, request: object) -> dict:
    code, out, err = _call(kind, request)
    assert code == 0, err
    return json.loads(out)


def _pa(z: complex) -> dict:
    return {"amplitude": abs(z), "angle_deg": math.degrees(cmath.phase(z)) % 360.0}


def _vec(d: dict, amount: str = "mass_g") -> complex:
    return d[amount] * cmath.exp(1j * math.radians(d["angle_deg"]))


TOLERANCE_REQ = {
    "grade": 6.3,
    "mass_kg": 120,
    "service_speed_rpm": 1480,
    "geometry": {
        "bearing_a_mm": 0,
        "bearing_b_mm": 800,
        "centre_of_mass_mm": 400,
        "plane_1_mm": 150,
        "plane_2_mm": 650,
    },
}


def test_tolerance_iso_keys_and_formula() -> None:
    out = _ok("tolerance", TOLERANCE_REQ)
    assert {"u_per_gmm", "e_per_um", "bearing_a_gmm", "bearing_b_gmm"} <= out.keys()
    # ISO 21940-11: U_per = 1000·G·m/(2π·n/60); symmetric rotor → half per bearing.
    u_per = 1000 * 6.3 * 120 / (2 * math.pi * 1480 / 60)
    assert_allclose(out["u_per_gmm"], u_per, rtol=1e-12)
    assert_allclose(out["e_per_um"], u_per / 120, rtol=1e-12)
    assert_allclose([out["bearing_a_gmm"], out["bearing_b_gmm"]], [u_per / 2] * 2, rtol=1e-12)


def test_tolerance_without_geometry() -> None:
    out = _ok("tolerance", {"grade": "G 2.5", "mass_kg": 10, "service_speed_rpm": 3000})
    assert_allclose(out["u_per_gmm"], 1000 * 2.5 * 10 / (100 * math.pi), rtol=1e-12)


def test_tolerance_4w_over_n() -> None:
    out = _ok("tolerance", {"method": "4w/n", "journal_load_kg": 250, "service_speed_rpm": 3600})
    # 6350·W/N g·mm per plane (4W/N oz·in, constant from the 1959 unit definitions).
    assert_allclose(out["bearing_a_gmm"], 6350 * 250 / 3600, rtol=1e-12)
    assert {"u_per_gmm", "e_per_um", "bearing_a_gmm", "bearing_b_gmm"} <= out.keys()


def test_tolerance_with_residual_verdict() -> None:
    req = dict(
        TOLERANCE_REQ,
        residuals=[
            {"unbalance_gmm": 3000, "angle_deg": 0},
            {"unbalance_gmm": 3000, "angle_deg": 0},
        ],
    )
    out = _ok("tolerance", req)
    # Statics: 3000 at 150 and 3000 at 650 on bearings 0/800 → A = B = 3000 (> U_per/2 = 2439).
    assert_allclose([p["residual_gmm"] for p in out["verdict"]["bearing_planes"]], [3000, 3000])
    assert out["verdict"]["passed"] is False


def test_single_plane_cancels_linear_plant() -> None:
    # Independent linear model V = H·(U + T) (influence-coefficient method, e.g. Rao,
    # Mechanical Vibrations): the correction must be −U.
    h = 0.04 * cmath.exp(1j * math.radians(-35))
    u = 12.0 * cmath.exp(1j * math.radians(200))
    t = 10.0 * cmath.exp(1j * math.radians(45))
    req = {
        "initial": _pa(h * u),
        "trial": {"mass_g": 10.0, "angle_deg": 45.0, "reading": _pa(h * (u + t))},
    }
    out = _ok("single-plane", req)
    assert set(out["correction"]) >= {"mass_g", "angle_deg"}
    assert abs(_vec(out["correction"]) + u) < 1e-9


def test_single_plane_other_radius() -> None:
    # Unbalance U = m·r is conserved: 12 g at 100 mm = 6 g at 200 mm.
    h = 0.05 + 0j
    u = 12.0 + 0j
    req = {
        "initial": _pa(h * u),
        "trial": {"mass_g": 5.0, "angle_deg": 90.0, "reading": _pa(h * (u + 5j))},
        "trial_radius_mm": 100,
        "correction_radius_mm": 200,
    }
    out = _ok("single-plane", req)
    assert_allclose(out["correction"]["mass_g"], 6.0)
    assert out["correction"]["radius_mm"] == 200


def _two_plane_request(a: np.ndarray, u: np.ndarray, t1: complex, t2: complex) -> dict:
    v0 = a @ u
    v1 = a @ (u + np.array([t1, 0]))
    v2 = a @ (u + np.array([0, t2]))
    return {
        "initial": [_pa(x) for x in v0],
        "trials": [
            {
                "plane": 1,
                "mass_g": abs(t1),
                "angle_deg": math.degrees(cmath.phase(t1)),
                "readings": [_pa(x) for x in v1],
            },
            {
                "plane": 2,
                "mass_g": abs(t2),
                "angle_deg": math.degrees(cmath.phase(t2)),
                "readings": [_pa(x) for x in v2],
            },
        ],
    }


def test_two_plane_cancels_linear_plant() -> None:
    # Independent linear plant V = A·(U + W); correction W = −U (influence-coefficient
    # method); condition number checked against numpy.linalg.cond.
    a = np.array(
        [
            [0.05 * cmath.exp(0.3j), 0.02 * cmath.exp(2.0j)],
            [0.015 * cmath.exp(-1.0j), 0.06 * cmath.exp(0.8j)],
        ]
    )
    u = np.array([20 * cmath.exp(1.1j), 8 * cmath.exp(-2.5j)])
    out = _ok("two-plane", _two_plane_request(a, u, 10 + 0j, 10j))
    assert [c["plane"] for c in out["corrections"]] == [1, 2]
    for c, uk in zip(out["corrections"], u, strict=True):
        assert set(c) >= {"plane", "mass_g", "angle_deg"}
        assert abs(_vec(c) + uk) < 1e-8
    assert_allclose(out["condition_number"], np.linalg.cond(a), rtol=1e-9)


def test_split_parts_recombine() -> None:
    out = _ok("split", {"mass_g": 10, "angle_deg": 100, "positions": 8, "first_position_deg": 0})
    assert [p["position"] for p in out["parts"]] == [3, 4]  # 90° and 135°
    for p in out["parts"]:
        assert set(p) >= {"position", "angle_deg", "mass_g"}
    total = sum(_vec(p) for p in out["parts"])
    assert abs(total - 10 * cmath.exp(1j * math.radians(100))) < 1e-9  # vector addition


def test_drill_depth_reproduces_mass() -> None:
    req = {"mass_g": 5.0, "drill_diameter_mm": 10.0, "density_g_cm3": 7.85, "point_angle_deg": 118}
    out = _ok("drill", req)
    assert {"depth_full_diameter_mm", "depth_to_tip_mm"} <= out.keys()
    # Elementary geometry: cylinder π d²/4·h plus cone of height (d/2)/tan(59°).
    c = 5.0 / math.tan(math.radians(59))
    vol = math.pi * 25.0 * out["depth_full_diameter_mm"] + math.pi * 25.0 * c / 3
    assert_allclose(vol * 7.85 / 1000, 5.0, rtol=1e-12)
    assert_allclose(out["depth_to_tip_mm"] - out["depth_full_diameter_mm"], c, rtol=1e-12)
    assert out["cautions"]


def test_drill_plan_for_radial_holes_counts_their_centroid() -> None:
    req = {"mass_g": 40.0, "drill_diameter_mm": 10.0, "material": "steel", "max_depth_mm": 25,
           "radius_mm": 180, "min_web_mm": 4, "direction": "radial", "max_spread_deg": 90}
    plan = _ok("drill", req)["plan"]
    assert plan["direction"] == "radial" and plan["depth_to_tip_mm"] <= 25
    # Each hole's mass counts at its centroid, inside the radius: Σ m·r_eff·cos δ = m·R.
    gain = sum(math.cos(math.radians(a)) for a in plan["hole_angles_deg"])
    assert plan["effective_radius_mm"] < 180
    assert_allclose(plan["mass_per_hole_g"] * plan["effective_radius_mm"] * gain, 40.0 * 180,
                    rtol=1e-6)


def _circle_readings(residual: complex, test: float, n: int, sens: complex, with_phase: bool):
    readings = []
    for k in range(n):
        theta = 360.0 * k / n
        z = sens * (residual + test * cmath.exp(1j * math.radians(theta)))
        item = {"position_deg": theta, "amplitude": abs(z)}
        if with_phase:
            item["angle_deg"] = math.degrees(cmath.phase(z))
        readings.append(item)
    return readings


@pytest.mark.parametrize("with_phase", [True, False])
def test_verify_residual_recovers_known_residual(with_phase) -> None:
    # Linear-machine model: reading = S·(U_r + T·e^{iθ}) on a circle (residual-unbalance
    # test with a test mass at N positions); the fit must return |U_r|.
    residual = 40 * cmath.exp(1j * math.radians(70))
    req = {
        "test_unbalance_gmm": 200.0,
        "readings": _circle_readings(residual, 200.0, 8, 0.01 * cmath.exp(0.4j), with_phase),
    }
    out = _ok("verify-residual", req)
    assert {"residual_gmm", "angle_deg", "fit"} <= out.keys()
    assert_allclose(out["residual_gmm"], 40.0, rtol=1e-6)
    if with_phase:
        assert_allclose(out["angle_deg"], 70.0, atol=1e-6)


def test_static_couple_keys_and_values() -> None:
    req = {
        "plane_1_mm": 100,
        "plane_2_mm": 500,
        "unbalances": [
            {"unbalance_gmm": 100, "angle_deg": 0},
            {"unbalance_gmm": 100, "angle_deg": 180},
        ],
        "bearings": {"bearing_a_mm": 0, "bearing_b_mm": 600},
    }
    out = _ok("static-couple", req)
    # Pure couple: static part zero, couple pair ±100 (ISO 21940-11 §4.2 representation).
    assert out["static"]["unbalance_gmm"] < 1e-12
    assert_allclose(out["couple"]["unbalance_gmm"], 100.0)
    # Statics: moment 100·(100−500) = −40000 g·mm² → bearing pair ±40000/600.
    assert_allclose([b["unbalance_gmm"] for b in out["bearing_planes"]], [40000 / 600] * 2)


def test_static_couple_recombine_round_trip() -> None:
    base = {"plane_1_mm": 0, "plane_2_mm": 300}
    first = _ok(
        "static-couple",
        dict(
            base,
            unbalances=[
                {"unbalance_gmm": 30, "angle_deg": 10},
                {"unbalance_gmm": 50, "angle_deg": 200},
            ],
        ),
    )
    back = _ok("static-couple", dict(base, static=first["static"], couple=first["couple"]))
    assert_allclose([u["unbalance_gmm"] for u in back["unbalances"]], [30, 50])


def test_combine_is_vector_sum() -> None:
    out = _ok(
        "combine", {"masses": [{"mass_g": 3, "angle_deg": 0}, {"mass_g": 4, "angle_deg": 90}]}
    )
    # 3-4-5 triangle (vector addition).
    assert_allclose(out["mass_g"], 5.0)
    assert_allclose(out["angle_deg"], math.degrees(math.atan2(4, 3)))


def test_machine_proving_umar_and_urr() -> None:
    readings = [
        {
            "position_deg": r["position_deg"],
            "indicated_gmm": r["amplitude"],
            "angle_deg": r["angle_deg"],
        }
        for r in _circle_readings(5 + 0j, 100.0, 12, 1.0 + 0j, True)
    ]
    out = _ok(
        "machine-proving",
        {
            "test_unbalance_gmm": 100.0,
            "readings": readings,
            "claimed_umar_gmm": 8.0,
            "before": [1000, 1000],
            "after": [50, 80],
        },
    )
    assert_allclose(out["umar_gmm"], 5.0, rtol=1e-6)
    # URR = (1 − after/before)·100 % (ISO 21940-21 definition, from memory).
    assert_allclose(out["urr_percent"], [95.0, 92.0])
    assert out["passed"] is True


def test_rigid_flexible() -> None:
    out = _ok(
        "rigid-flexible",
        {
            "service_speed_rpm": 3600,
            "first_critical_rpm": 4000,
            "machine_type": "soft",
            "suspension_resonance_rpm": 300,
            "balancing_speed_rpm": 900,
            "max_permitted_speed_rpm": 3600,
            "damping_ratio": 0.1,
        },
    )
    # Common practice: 3600/4000 = 0.9 > 0.7 → not rigid.
    assert out["rigid"] is False and out["warnings"]
    assert out["balancing_speed"]["speed_ok"] is True
    assert out["balancing_speed"]["cautions"]
    # Jeffcott at r = 3, ζ = 0.1: 9/√(64 + 0.36) (Rao, from memory).
    assert_allclose(out["jeffcott"]["amplitude_ratio"], 9 / math.sqrt(64 + 0.36))


def test_table_output_without_json() -> None:
    result = CliRunner().invoke(calc_command, ["tolerance"], input=json.dumps(TOLERANCE_REQ))
    assert result.exit_code == 0
    assert "u_per_gmm" in result.stdout and "{" not in result.stdout


def test_input_file(tmp_path) -> None:
    path = tmp_path / "req.json"
    path.write_text(json.dumps(TOLERANCE_REQ), encoding="utf-8")
    result = CliRunner().invoke(calc_command, ["tolerance", "--json", "--input", str(path)])
    assert result.exit_code == 0
    assert "u_per_gmm" in json.loads(result.stdout)


BAD = [
    ("tolerance", "{not json", "request"),
    ("tolerance", "[1, 2]", "request"),
    ("tolerance", {"grade": 7, "mass_kg": 1, "service_speed_rpm": 1000}, "grade"),
    ("tolerance", {"grade": 6.3, "mass_kg": 0, "service_speed_rpm": 1000}, "mass_kg"),
    ("tolerance", {"grade": 6.3, "mass_kg": -3, "service_speed_rpm": 1000}, "mass_kg"),
    ("tolerance", {"grade": 6.3, "mass_kg": "ten", "service_speed_rpm": 1000}, "mass_kg"),
    ("tolerance", '{"grade": 6.3, "mass_kg": NaN, "service_speed_rpm": 1000}', "mass_kg"),
    (
        "tolerance",
        '{"grade": 6.3, "mass_kg": 5, "service_speed_rpm": Infinity}',
        "service_speed_rpm",
    ),
    ("tolerance", {"grade": 6.3, "mass_kg": 5}, "service_speed_rpm"),
    (
        "tolerance",
        dict(
            TOLERANCE_REQ, geometry={"bearing_a_mm": 0, "bearing_b_mm": 0, "centre_of_mass_mm": 1}
        ),
        "geometry.bearing_b_mm",
    ),
    ("tolerance", {"method": "guess"}, "method"),
    (
        "tolerance",
        {"method": "4w/n", "journal_load_kg": 0, "service_speed_rpm": 3600},
        "journal_load_kg",
    ),
    (
        "single-plane",
        {
            "initial": {"amplitude": 5, "angle_deg": 0},
            "trial": {"mass_g": 10, "angle_deg": 0, "reading": {"amplitude": 5, "angle_deg": 0}},
        },
        "trial.reading",
    ),
    (
        "single-plane",
        {
            "initial": {"amplitude": 5, "angle_deg": 0},
            "trial": {"mass_g": -1, "angle_deg": 0, "reading": {"amplitude": 6, "angle_deg": 0}},
        },
        "trial.mass_g",
    ),
    ("single-plane", {"initial": {"amplitude": 5}}, "initial.angle_deg"),
    ("two-plane", {"initial": [{"amplitude": 1, "angle_deg": 0}], "trials": []}, "trials"),
    ("two-plane", {"initial": "x", "trials": []}, "initial"),
    ("split", {"mass_g": 10, "angle_deg": 0, "positions": 2}, "positions"),
    ("split", {"mass_g": 0, "angle_deg": 0, "positions": 6}, "mass_g"),
    ("drill", {"mass_g": 5, "drill_diameter_mm": 0, "density_g_cm3": 7.85}, "drill_diameter_mm"),
    ("drill", {"mass_g": 5, "drill_diameter_mm": 8, "material": "cheese"}, "material"),
    (
        "verify-residual",
        {"test_unbalance_gmm": 100, "readings": [{"position_deg": 0, "amplitude": 1}]},
        "readings",
    ),
    (
        "static-couple",
        {
            "plane_1_mm": 100,
            "plane_2_mm": 100,
            "unbalances": [{"unbalance_gmm": 1, "angle_deg": 0}] * 2,
        },
        "plane_2_mm",
    ),
    ("combine", {"masses": []}, "masses"),
    ("machine-proving", {}, "readings"),
    ("rigid-flexible", {"service_speed_rpm": 0, "first_critical_rpm": 1000}, "service_speed_rpm"),
    (
        "rigid-flexible",
        {
            "service_speed_rpm": 10,
            "first_critical_rpm": 1000,
            "machine_type": "wobbly",
            "suspension_resonance_rpm": 10,
        },
        "machine_type",
    ),
    ("no-such-kind", {}, "kind"),
]


@pytest.mark.parametrize(("kind", "request_", "field"), BAD)
def test_bad_input_one_line_no_traceback(kind, request_, field) -> None:
    code, out, err = _call(kind, request_)
    assert code == 2
    assert out == ""
    assert err.count("\n") == 1 and err.endswith("\n")
    assert err.startswith(f"error: {field}: ")
    assert "Traceback" not in err


def test_every_kind_is_listed_in_help() -> None:
    result = CliRunner().invoke(calc_command, ["--help"])
    assert result.exit_code == 0
    for kind in KINDS:
        assert kind in result.stdout
