"""Key convention: key mass, half-key and the compensating correction."""

from __future__ import annotations

import math

import pytest

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.keys import key_compensation, key_mass_g, key_unbalance_gmm


def test_key_mass_hand_computed() -> None:
    # Hand computation (first principles): 8 × 7 × 40 mm = 2240 mm³ = 2.24 cm³;
    # × 7.85 g/cm³ (handbook density of steel) = 17.584 g.
    assert key_mass_g(8.0, 7.0, 40.0) == pytest.approx(17.584, rel=1e-12)
    assert key_mass_g(8.0, 7.0, 40.0, density_g_cm3=2.70) == pytest.approx(6.048, rel=1e-12)


def test_rounded_ends_as_rectangle_plus_circle() -> None:
    # Hand computation: a rounded-end key is a 8 × (40 − 8) rectangle plus one full
    # circle of diameter 8, times the height: (256 + 16π) · 7 mm³.
    expected = (8.0 * 32.0 + math.pi * 16.0) * 7.0 * 7.85 / 1000.0
    assert key_mass_g(8.0, 7.0, 40.0, rounded_ends=True) == pytest.approx(expected, rel=1e-12)


def test_key_unbalance_is_mass_times_radius() -> None:
    assert key_unbalance_gmm(17.584, 20.0) == pytest.approx(351.68, rel=1e-12)


def test_half_key_compensation_for_a_key_longer_than_the_hub() -> None:
    # Hand computation (first principles, module docstring): key 8 × 7 × 50 mm,
    # hub 40 mm → piece 10 mm; half of it: 0.5 · 7.85 · 8·7·10 / 1000 = 2.198 g;
    # at r_key = 20 mm: ΔU = 43.96 g·mm; at r_c = 100 mm: 0.4396 g at key + 180°.
    c = key_compensation(
        "half_key", key_width_mm=8.0, key_height_mm=7.0, key_length_mm=50.0,
        hub_length_mm=40.0, key_radius_mm=20.0, correction_radius_mm=100.0, key_angle_deg=30.0,
    )
    assert c.key_mass_g == pytest.approx(21.98, rel=1e-12)
    assert c.half_key_mass_g == pytest.approx(10.99, rel=1e-12)
    assert c.piece_length_mm == pytest.approx(10.0)
    assert c.piece_mass_g == pytest.approx(2.198, rel=1e-12)
    assert c.unbalance_gmm == pytest.approx(43.96, rel=1e-12)
    assert c.correction_mass_g == pytest.approx(0.4396, rel=1e-12)
    assert c.correction_angle_deg == pytest.approx(210.0)
    assert "half-key" in c.statement


def test_half_key_compensation_for_a_key_shorter_than_the_hub_goes_at_the_key() -> None:
    # Hand computation: piece −10 mm → ΔU = −43.96 g·mm: add 0.4396 g at the key's angle.
    c = key_compensation(
        "half_key", key_width_mm=8.0, key_height_mm=7.0, key_length_mm=30.0,
        hub_length_mm=40.0, key_radius_mm=20.0, correction_radius_mm=100.0, key_angle_deg=30.0,
    )
    assert c.unbalance_gmm == pytest.approx(-43.96, rel=1e-12)
    assert c.correction_mass_g == pytest.approx(0.4396, rel=1e-12)
    assert c.correction_angle_deg == pytest.approx(30.0)


def test_equal_lengths_and_full_key_need_no_compensation() -> None:
    kw = dict(key_width_mm=8.0, key_height_mm=7.0, key_length_mm=40.0, hub_length_mm=40.0,
              key_radius_mm=20.0, correction_radius_mm=100.0)
    same = key_compensation("half_key", **kw)
    assert same.correction_mass_g == 0.0
    assert same.correction_angle_deg is None
    full = key_compensation("full_key", **{**kw, "key_length_mm": 60.0})
    assert full.correction_mass_g == 0.0
    assert "full-key" in full.statement


@pytest.mark.parametrize(
    ("convention", "override", "field"),
    [
        ("quarter_key", {}, "key_convention"),
        ("none", {}, "key_convention"),
        ("half_key", {"key_width_mm": 0.0}, "key_width_mm"),
        ("half_key", {"hub_length_mm": -1.0}, "hub_length_mm"),
        ("half_key", {"key_radius_mm": float("nan")}, "key_radius_mm"),
        ("half_key", {"correction_radius_mm": 0.0}, "correction_radius_mm"),
    ],
)
def test_bad_key_input_names_the_field(convention: str, override: dict, field: str) -> None:
    kw = dict(key_width_mm=8.0, key_height_mm=7.0, key_length_mm=50.0, hub_length_mm=40.0,
              key_radius_mm=20.0, correction_radius_mm=100.0)
    kw.update(override)
    with pytest.raises(BalancingInputError) as exc:
        key_compensation(convention, **kw)
    assert exc.value.field == field


def test_rounded_key_shorter_than_its_width_is_refused() -> None:
    with pytest.raises(BalancingInputError) as exc:
        key_mass_g(10.0, 8.0, 6.0, rounded_ends=True)
    assert exc.value.field == "key_length_mm"
