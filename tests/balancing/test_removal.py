"""Drilled-hole removal against solid geometry integrated independently with scipy."""

from __future__ import annotations

import cmath
import math

import pytest
import scipy.integrate
from hypothesis import given, settings
from hypothesis import strategies as st

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.removal import DENSITIES, drill_depth, drill_mass, drill_plan


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
