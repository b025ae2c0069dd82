"""Drilled-hole removal against solid geometry integrated independently with scipy."""

from __future__ import annotations

import cmath
import math

import numpy as np
import pytest
import scipy.integrate
from hypothesis import given, settings
from hypothesis import strategies as st

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.removal import (
    DENSITIES,
    DRILLING_CAUTIONS,
    cone_volume_mm3,
    drill_depth,
    drill_mass,
    drill_plan,
    hole_centroid_depth_mm,
)


def _hole_mass_by_integration(d_mm: float, tip_depth_mm: float, point_deg: float,
                              rho_g_cm3: float) -> float:
    """Mass by integrating the hole's cross-section from the surface to the tip (scipy.quad)."""
    tan_half = math.tan(math.radians(point_deg) / 2)

    def area(z: float) -> float:  # z measured from the surface downwards
        radius = min(d_mm / 2, (tip_depth_mm - z) * tan_half)
        return math.pi * radius * radius

    cone = d_mm / 2 / tan_half
    knee = max(tip_depth_mm - cone, 0.0)
    pieces = [scipy.integrate.quad(area, 0.0, knee)[0] if knee > 0 else 0.0,
              scipy.integrate.quad(area, knee, tip_depth_mm)[0]]
    return rho_g_cm3 * sum(pieces) / 1000.0


def test_hole_mass_hand_example() -> None:
    # Hand arithmetic: Ø10 mm, 10 mm full depth, 118°, steel 7.85 g/cm³:
    # cylinder 785.40 mm³ + cone π·25·3.0043/3 = 78.65 mm³ -> 864.05 mm³ -> 6.783 g.
    m = drill_mass(10.0, 7.85, depth_full_diameter_mm=10.0)
    assert m == pytest.approx(6.783, abs=1e-3)


def test_point_length_of_a_118_degree_drill_is_about_0_3_d() -> None:
    # Shop rule (common practice, no source): a 118° point is about 0.3·d long.
    h = drill_depth(5.0, 12.0, 7.85)
    assert h.point_length_mm == pytest.approx(0.3 * 12.0, rel=0.005)
    assert h.depth_to_tip_mm == pytest.approx(h.depth_full_diameter_mm + h.point_length_mm)
    assert h.cautions


@pytest.mark.parametrize("point", [90.0, 118.0, 135.0, 140.0])
@pytest.mark.parametrize("tip_depth", [0.8, 2.0, 15.0, 40.0])
def test_mass_matches_integrated_solid_geometry(point: float, tip_depth: float) -> None:
    expected = _hole_mass_by_integration(8.0, tip_depth, point, 7.85)
    assert drill_mass(8.0, 7.85, depth_to_tip_mm=tip_depth, point_angle_deg=point) == pytest.approx(
        expected, rel=1e-9
    )


def test_shallow_hole_is_a_cone_with_a_warning() -> None:
    tiny = drill_mass(10.0, 7.85, depth_to_tip_mm=1.5)
    h = drill_depth(tiny, 10.0, 7.85)
    assert h.depth_full_diameter_mm == 0.0
    assert h.depth_to_tip_mm == pytest.approx(1.5)
    assert h.surface_diameter_mm < 10.0
    assert h.warnings


@settings(max_examples=300, deadline=None)
@given(
    mass=st.floats(1e-3, 500.0),
    d=st.floats(1.0, 30.0),
    rho=st.sampled_from([v.g_cm3 for v in DENSITIES.values()]),
    point=st.floats(60.0, 150.0),
)
def test_property_mass_depth_mass_round_trip(
    mass: float, d: float, rho: float, point: float
) -> None:
    h = drill_depth(mass, d, rho, point_angle_deg=point)
    back_tip = drill_mass(d, rho, depth_to_tip_mm=h.depth_to_tip_mm, point_angle_deg=point)
    assert back_tip == pytest.approx(mass, rel=1e-9)
    if h.depth_full_diameter_mm > 0:
        back_full = drill_mass(d, rho, depth_full_diameter_mm=h.depth_full_diameter_mm,
                               point_angle_deg=point)
        assert back_full == pytest.approx(mass, rel=1e-9)


def test_densities_table() -> None:
    # Values as in Machinery's Handbook's densities of metals (from memory), g/cm³.
    expected = {"steel": 7.85, "aluminium": 2.70, "grey_cast_iron": 7.2, "brass": 8.5,
                "bronze": 8.8}
    for key, value in expected.items():
        assert DENSITIES[key].g_cm3 == pytest.approx(value)
    assert 7.9 <= DENSITIES["stainless_steel"].g_cm3 <= 8.0
    for d in DENSITIES.values():
        assert d.low_g_cm3 <= d.g_cm3 <= d.high_g_cm3
        assert "Machinery's Handbook" in d.source


def test_several_holes_when_one_is_too_deep() -> None:
    mass, angle = 50.0, 120.0
    plan = drill_plan(mass, 10.0, 7.85, max_depth_mm=20.0, radius_mm=100.0, min_web_mm=3.0,
                      angle_deg=angle)
    single = drill_depth(mass, 10.0, 7.85)
    assert single.depth_to_tip_mm > 20.0
    assert plan.holes > 1
    assert plan.depth_to_tip_mm <= 20.0
    # Fewest holes: one hole fewer would be too deep (checked with the plan's own geometry).
    assert drill_depth(plan.mass_per_hole_g * plan.holes / (plan.holes - 1), 10.0, 7.85
                       ).depth_to_tip_mm > 20.0
    # Vector sum of the holes equals the wanted removal (independent vector arithmetic).
    total = sum(cmath.rect(plan.mass_per_hole_g, math.radians(a)) for a in plan.hole_angles_deg)
    assert abs(total - cmath.rect(mass, math.radians(angle))) < 1e-9
    # Neighbouring centres are d + web apart (chord at the radius).
    chord = 2 * 100.0 * math.sin(math.radians(plan.pitch_deg) / 2)
    assert chord == pytest.approx(13.0)
    assert drill_mass(10.0, 7.85, depth_to_tip_mm=plan.depth_to_tip_mm) == pytest.approx(
        plan.mass_per_hole_g)


def test_one_hole_when_it_fits() -> None:
    plan = drill_plan(5.0, 10.0, 7.85, max_depth_mm=20.0, radius_mm=100.0, min_web_mm=3.0,
                      angle_deg=10.0)
    assert plan.holes == 1
    assert plan.hole_angles_deg == (10.0,)


@pytest.mark.parametrize(
    ("call", "field"),
    [
        (lambda: drill_depth(0.0, 10, 7.85), "mass_g"),
        (lambda: drill_depth(-1.0, 10, 7.85), "mass_g"),
        (lambda: drill_depth(1.0, 0.0, 7.85), "drill_diameter_mm"),
        (lambda: drill_depth(1.0, -3.0, 7.85), "drill_diameter_mm"),
        (lambda: drill_depth(1.0, math.nan, 7.85), "drill_diameter_mm"),
        (lambda: drill_depth(1.0, 10, 0.0), "density_g_cm3"),
        (lambda: drill_depth(1.0, 10, math.inf), "density_g_cm3"),
        (lambda: drill_depth(1.0, 10, 7.85, point_angle_deg=180.0), "point_angle_deg"),
        (lambda: drill_depth(1.0, 10, 7.85, point_angle_deg=0.0), "point_angle_deg"),
        (lambda: drill_mass(10, 7.85), "depth_full_diameter_mm"),
        (lambda: drill_mass(10, 7.85, depth_full_diameter_mm=1, depth_to_tip_mm=2),
         "depth_full_diameter_mm"),
        (lambda: drill_mass(10, 7.85, depth_to_tip_mm=-1.0), "depth_to_tip_mm"),
        (lambda: drill_plan(5000.0, 10, 7.85, max_depth_mm=20, radius_mm=100, min_web_mm=3),
         "max_depth_mm"),
        (lambda: drill_plan(50.0, 10, 7.85, max_depth_mm=20, radius_mm=100, min_web_mm=3,
                            max_holes=2), "max_depth_mm"),
        (lambda: drill_plan(50.0, 10, 7.85, max_depth_mm=20, radius_mm=5, min_web_mm=3),
         "radius_mm"),
        (lambda: drill_plan(50.0, 10, 7.85, max_depth_mm=0, radius_mm=100, min_web_mm=3),
         "max_depth_mm"),
        (lambda: drill_plan(50.0, 10, 7.85, max_depth_mm=20, radius_mm=100, min_web_mm=-1),
         "min_web_mm"),
    ],
)
def test_bad_input_names_the_field(call, field: str) -> None:
    with pytest.raises(BalancingInputError) as err:
        call()
    assert err.value.field == field


# ------------------------------------------------------------------ point, centroid, radial


def _area(d_mm: float, tip_depth_mm: float, point_deg: float):  # type: ignore[no-untyped-def]
    tan_half = math.tan(math.radians(point_deg) / 2)

    def area(z: float) -> float:  # z from the surface downwards
        radius = min(d_mm / 2, (tip_depth_mm - z) * tan_half)
        return math.pi * radius * radius

    return area


def _quad(f, a: float, b: float, knee: float) -> float:  # type: ignore[no-untyped-def]
    """scipy.quad split at the knee between cylinder and cone (the profile has a corner)."""
    knee = min(max(knee, a), b)
    return sum(scipy.integrate.quad(f, lo, hi)[0] for lo, hi in ((a, knee), (knee, b)) if hi > lo)


def test_cone_volume_is_the_handbook_formula() -> None:
    # Machinery handbook cone volume V = π r² h / 3, tip height h = r / tan 59° for a
    # 118° point (both from memory). Ø10: h = 5 / 1.664279 = 3.004302 mm,
    # V = π · 25 · 3.004302 / 3 = 78.652 mm³ (hand arithmetic).
    assert cone_volume_mm3(10.0) == pytest.approx(78.652, abs=1e-3)
    # Independent check: integrate the cone's circular cross-section with scipy.
    h = 5.0 / math.tan(math.radians(59.0))
    by_quad = scipy.integrate.quad(lambda z: math.pi * (5.0 * z / h) ** 2, 0.0, h)[0]
    assert cone_volume_mm3(10.0) == pytest.approx(by_quad, rel=1e-9)


@pytest.mark.parametrize(("d", "tip", "point"), [(10.0, 30.0, 118.0), (6.0, 2.0, 118.0),
                                                 (8.0, 12.0, 90.0), (12.0, 3.6, 118.0)])
def test_centroid_depth_against_integration(d: float, tip: float, point: float) -> None:
    # z̄ = ∫A(z)·z dz / ∫A(z) dz over the hole profile, integrated with scipy.quad.
    area = _area(d, tip, point)
    knee = tip - d / 2 / math.tan(math.radians(point) / 2)
    moment = _quad(lambda z: area(z) * z, 0.0, tip, knee)
    volume = _quad(area, 0.0, tip, knee)
    assert hole_centroid_depth_mm(d, tip, point) == pytest.approx(moment / volume, rel=1e-7)


def test_radial_holes_remove_the_unbalance_at_their_centroid() -> None:
    mass, angle, radius = 40.0, 75.0, 180.0
    plan = drill_plan(mass, 10.0, 7.85, max_depth_mm=25.0, radius_mm=radius, min_web_mm=4.0,
                      angle_deg=angle, direction="radial", max_spread_deg=90.0)
    assert plan.direction == "radial" and plan.depth_to_tip_mm <= 25.0
    # Each hole's first moment about the axis by integration: ∫ρA(z)(R − z)dz (scipy.quad).
    area = _area(10.0, plan.depth_to_tip_mm, 118.0)
    knee = plan.depth_to_tip_mm - 5.0 / math.tan(math.radians(59.0))
    moment_gmm = 7.85 / 1000 * _quad(lambda z: area(z) * (radius - z), 0.0,
                                      plan.depth_to_tip_mm, knee)
    # numpy vector sum of the holes' unbalances equals the wanted m·R at the removal angle.
    holes = np.array([cmath.rect(moment_gmm, math.radians(a)) for a in plan.hole_angles_deg])
    assert holes.sum() == pytest.approx(cmath.rect(mass * radius, math.radians(angle)), rel=1e-6)
    # A radial hole removes more mass than the same unbalance needs at R (centroid inside R).
    assert plan.effective_radius_mm is not None and plan.effective_radius_mm < radius
    assert plan.total_removed_g > mass
    # Web kept at the deepest permitted tip (holes converge inwards): chord at R − 25 = d + web.
    chord = 2 * (radius - 25.0) * math.sin(math.radians(plan.pitch_deg) / 2)
    assert chord == pytest.approx(14.0)


def test_the_one_111_mm_hole_becomes_several_within_the_limit_or_a_refusal() -> None:
    # The old advice: one Ø10 hole 111 mm deep in steel. By hand: V = A·(111 − c) + A·c/3
    # with A = π·25 = 78.540 mm², c = 3.0043 mm → 8560.6 mm³ → 67.20 g at 7.85 g/cm³.
    mass = 7.85 * (math.pi * 25 * (111 - 5 / math.tan(math.radians(59))) + 78.652) / 1000
    assert mass == pytest.approx(67.20, abs=0.01)
    assert drill_depth(mass, 10.0, 7.85).depth_to_tip_mm == pytest.approx(111.0)
    plan = drill_plan(mass, 10.0, 7.85, max_depth_mm=30.0, radius_mm=250.0, min_web_mm=5.0,
                      angle_deg=0.0, direction="radial", max_spread_deg=90.0)
    assert plan.holes > 1 and plan.depth_to_tip_mm <= 30.0
    # Fewer holes would not do: n − 1 holes at the full 30 mm remove less first moment
    # than needed even on the removal line (cos = 1), by the integrated moment above.
    area = _area(10.0, 30.0, 118.0)
    knee = 30.0 - 5 / math.tan(math.radians(59))
    full_moment = 7.85 / 1000 * _quad(lambda z: area(z) * (250.0 - z), 0.0, 30.0, knee)
    assert (plan.holes - 1) * full_moment < mass * 250.0
    with pytest.raises(BalancingInputError) as err:
        drill_plan(mass, 10.0, 7.85, max_depth_mm=6.0, radius_mm=250.0, min_web_mm=5.0,
                   direction="radial", max_spread_deg=90.0, max_holes=8)
    assert err.value.field == "max_depth_mm" and "add mass" in err.value.message


def test_axial_plan_keeps_the_mass_at_the_radius() -> None:
    plan = drill_plan(5.0, 10.0, 7.85, max_depth_mm=20.0, radius_mm=100.0, min_web_mm=3.0)
    assert plan.effective_radius_mm == 100.0 and plan.direction == "axial"


@pytest.mark.parametrize("bad", ["abc", 0.0, -4.0, math.nan, math.inf])
def test_bad_drill_diameter_is_named(bad) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(BalancingInputError) as err:
        drill_plan(5.0, bad, 7.85, max_depth_mm=20.0, radius_mm=100.0, min_web_mm=3.0)
    assert err.value.field == "drill_diameter_mm"


def test_radial_limit_must_stay_inside_the_radius() -> None:
    with pytest.raises(BalancingInputError) as err:
        drill_plan(5.0, 10.0, 7.85, max_depth_mm=60.0, radius_mm=50.0, min_web_mm=3.0,
                   direction="radial")
    assert err.value.field == "max_depth_mm"


def test_drilling_caution_is_one_block_naming_the_hazards() -> None:
    # Common practice, no source: wall, stress raisers at blade roots/keyways, chips,
    # and deference to the rotor maker and licensed practice.
    assert len(DRILLING_CAUTIONS) == 1
    text = DRILLING_CAUTIONS[0]
    for word in ("wall", "stress raiser", "blade roots", "keyways", "chip", "rotor maker",
                 "licensed practice"):
        assert word in text


def test_refusal_for_a_single_hole_reads_one_hole() -> None:
    with pytest.raises(BalancingInputError) as err:
        drill_plan(50.0, 10, 7.85, max_depth_mm=20, radius_mm=100, min_web_mm=3, max_holes=1)
    assert "even one hole of 10 mm" in err.value.message and "1 holes" not in err.value.message
