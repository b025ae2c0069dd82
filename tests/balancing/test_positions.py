"""Splitting onto fixed positions, combining masses, choosing stock weights."""

from __future__ import annotations

import cmath
import itertools
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.positions import (
    WeightOnRotor,
    choose_weights,
    combine_masses,
    plan_trim,
    position_angles_deg,
    round_to_stock,
    split_to_positions,
)


def _vector(mass_g: float, angle_deg: float) -> complex:
    return cmath.rect(mass_g, math.radians(angle_deg))


def test_split_by_the_law_of_sines() -> None:
    # Hand arithmetic, law of sines (any trigonometry text): 8 blades at 45°,
    # 10 g at 30° -> 10·sin15°/sin45° = 3.660 g at 0°, 10·sin30°/sin45° = 7.071 g at 45°.
    r = split_to_positions(10.0, 30.0, 8, 0.0)
    assert [(p.position, p.angle_deg) for p in r.parts] == [(1, 0.0), (2, 45.0)]
    assert r.parts[0].mass_g == pytest.approx(3.6603, abs=1e-4)
    assert r.parts[1].mass_g == pytest.approx(7.0711, abs=1e-4)
    assert r.total_mass_g == pytest.approx(3.6603 + 7.0711, abs=2e-4)


def test_split_wraps_round_past_the_last_position() -> None:
    # 6 holes, first at 10°: positions 10, 70, ..., 310. 350° lies between 310° (no. 6)
    # and 10° (no. 1), 40° past no. 6: 5·sin20°/sin60° and 5·sin40°/sin60° (hand arithmetic).
    r = split_to_positions(5.0, 350.0, 6, 10.0)
    assert [p.position for p in r.parts] == [6, 1]
    def sin(deg: float) -> float:
        return math.sin(math.radians(deg))

    assert r.parts[0].mass_g == pytest.approx(5 * sin(20) / sin(60))
    assert r.parts[1].mass_g == pytest.approx(5 * sin(40) / sin(60))


@pytest.mark.parametrize("angle", [90.0, 450.0, -270.0])
def test_correction_on_a_position_gives_one_part(angle: float) -> None:
    r = split_to_positions(4.0, angle, 12, 0.0)
    assert len(r.parts) == 1
    assert r.parts[0].position == 4
    assert r.parts[0].mass_g == pytest.approx(4.0)


def test_wide_spacing_warns_about_the_extra_mass() -> None:
    # 3 positions, correction half-way: each part = m·sin60°/sin120° = m, total 2m.
    r = split_to_positions(3.0, 60.0, 3, 0.0)
    assert r.total_mass_g == pytest.approx(6.0)
    assert r.warnings


@settings(max_examples=300, deadline=None)
@given(
    mass=st.floats(0.01, 1e4),
    angle=st.floats(-720, 720),
    n=st.integers(3, 72),
    first=st.floats(-360, 360),
)
def test_property_split_parts_recombine_to_the_correction(
    mass: float, angle: float, n: int, first: float
) -> None:
    r = split_to_positions(mass, angle, n, first)
    total = sum(_vector(p.mass_g, p.angle_deg) for p in r.parts)
    assert abs(total - _vector(mass, angle)) <= 1e-9 * mass
    assert all(p.mass_g > 0 for p in r.parts)
    assert 1 <= len(r.parts) <= 2


def test_combine_three_four_five() -> None:
    # 3 g at 0° + 4 g at 90° = 5 g at atan(4/3) = 53.130° (Pythagoras).
    c = combine_masses([3.0, 4.0], [0.0, 90.0])
    assert c.mass_g == pytest.approx(5.0)
    assert c.angle_deg == pytest.approx(math.degrees(math.atan2(4, 3)))


def test_combine_at_different_radii() -> None:
    # U = m·r: 10 g at 100 mm and 5 g at 200 mm on the same side = 2000 g·mm = 20 g at 100 mm.
    c = combine_masses([10.0, 5.0], [30.0, 30.0], radii_mm=[100.0, 200.0], to_radius_mm=100.0)
    assert c.mass_g == pytest.approx(20.0)
    assert c.angle_deg == pytest.approx(30.0)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.floats(0, 1e3), st.floats(-360, 360)), min_size=1, max_size=8))
def test_property_combined_mass_is_the_vector_sum(items: list[tuple[float, float]]) -> None:
    c = combine_masses([m for m, _ in items], [a for _, a in items])
    expected = sum(_vector(m, a) for m, a in items)
    scale = max(1.0, sum(m for m, _ in items))
    assert abs(c.vector_g - expected) <= 1e-9 * scale
    assert abs(_vector(c.mass_g, c.angle_deg) - expected) <= 1e-9 * scale


def _brute_force_best(mass, angle, n, first, sizes, per):
    """Independent search: every multiset on every pair of adjacent positions."""
    want = _vector(mass, angle)
    angles = [first + k * 360 / n for k in range(n)]
    options = [c for k in range(per + 1) for c in itertools.combinations_with_replacement(sizes, k)]
    best = math.inf
    for k in range(n):
        e1 = cmath.rect(1, math.radians(angles[k]))
        e2 = cmath.rect(1, math.radians(angles[(k + 1) % n]))
        for a in options:
            for b in options:
                best = min(best, abs(want - sum(a) * e1 - sum(b) * e2))
    return best


@pytest.mark.parametrize(
    ("mass", "angle", "n", "first"),
    [(7.0, 90.0, 8, 0.0), (7.3, 30.0, 8, 0.0), (13.0, 200.0, 6, 15.0), (2.4, 359.0, 12, 0.0)],
)
def test_weight_choice_is_as_good_as_a_brute_force_search(mass, angle, n, first) -> None:
    sizes = (1.0, 2.0, 5.0, 10.0)
    r = choose_weights(mass, angle, n, first, sizes, max_per_position=2)
    fitted = sum(_vector(p.mass_g, p.angle_deg) for p in r.parts)
    assert abs(fitted - r.fitted_vector_g) < 1e-9
    assert abs(_vector(mass, angle) - fitted) == pytest.approx(r.residual_mass_g, abs=1e-9)
    # Searching neighbouring pairs only may not beat a search over all pairs, but here
    # the bracketing pair is where the optimum lies.
    assert r.residual_mass_g == pytest.approx(_brute_force_best(mass, angle, n, first, sizes, 2),
                                              abs=1e-9)
    for p in r.parts:
        assert sum(p.pieces_g) == pytest.approx(p.mass_g)
        assert len(p.pieces_g) <= 2
        assert set(p.pieces_g) <= set(sizes)


def test_weight_choice_exact_on_a_position_uses_fewest_pieces() -> None:
    r = choose_weights(7.0, 90.0, 8, 0.0, [1, 2, 5, 10], max_per_position=3)
    assert r.residual_mass_g == pytest.approx(0.0, abs=1e-12)
    assert len(r.parts) == 1
    assert sorted(r.parts[0].pieces_g) == [2.0, 5.0]


def test_weight_choice_warns_when_nothing_fits() -> None:
    r = choose_weights(0.2, 0.0, 8, 0.0, [5.0])
    assert r.parts == ()
    assert r.warnings


@pytest.mark.parametrize(
    ("call", "field"),
    [
        (lambda: split_to_positions(0.0, 10, 8), "mass_g"),
        (lambda: split_to_positions(-1.0, 10, 8), "mass_g"),
        (lambda: split_to_positions(math.nan, 10, 8), "mass_g"),
        (lambda: split_to_positions(1.0, math.inf, 8), "angle_deg"),
        (lambda: split_to_positions(1.0, 10, 2), "positions"),
        (lambda: split_to_positions(1.0, 10, 1), "positions"),
        (lambda: split_to_positions(1.0, 10, 7.5), "positions"),
        (lambda: split_to_positions(1.0, 10, 8, math.nan), "first_position_deg"),
        (lambda: combine_masses([], []), "masses_g"),
        (lambda: combine_masses([1.0, -2.0], [0, 0]), "masses_g"),
        (lambda: combine_masses([1.0, math.nan], [0, 0]), "masses_g"),
        (lambda: combine_masses([1.0], [0, 1]), "angles_deg"),
        (lambda: combine_masses([1.0], [0], radii_mm=[0.0], to_radius_mm=1.0), "radii_mm"),
        (lambda: combine_masses([1.0], [0], radii_mm=[1.0]), "to_radius_mm"),
        (lambda: choose_weights(1.0, 0, 8, 0, []), "available_g"),
        (lambda: choose_weights(1.0, 0, 8, 0, [1, 0]), "available_g"),
        (lambda: choose_weights(1.0, 0, 8, 0, [1, 2], max_per_position=0), "max_per_position"),
        (lambda: choose_weights(1.0, 0, 8, 0, list(range(1, 13)), max_per_position=10),
         "max_per_position"),
        (lambda: position_angles_deg(2), "positions"),
    ],
)
def test_bad_input_names_the_field(call, field: str) -> None:
    with pytest.raises(BalancingInputError) as err:
        call()
    assert err.value.field == field


def test_position_angles() -> None:
    np.testing.assert_allclose(position_angles_deg(4, 350.0), [350.0, 80.0, 170.0, 260.0])


# --------------------------------------------------------------------------- stock and trims


def test_round_to_stock_at_a_free_angle() -> None:
    # By hand: sums of at most two of {5, 10, 20} are 0, 5, 10, 15, 20, 25, 30, 40;
    # 13.4 g is nearest 15 (5 + 10); the miss is 13.4 − 15 = −1.6 g along 70°.
    r = round_to_stock(13.4, 70.0, [5, 10, 20])
    assert r.pieces_g == (5.0, 10.0) and r.mass_g == 15.0
    assert r.residual_vector_g == pytest.approx(_vector(-1.6, 70.0))


def test_trim_near_a_fitted_weight_replaces_it_with_the_combined_mass() -> None:
    on = [WeightOnRotor(7, _vector(12.0, 40.0)), WeightOnRotor(9, _vector(5.0, 200.0))]
    trim = _vector(4.0, 55.0)  # 15° from the 12 g weight: within 30°
    plan = plan_trim(trim, on)
    assert plan.kind == "replace" and plan.replaces == 7
    # numpy vector sum: one weight E + T in place of E.
    e_plus_t = np.sum([_vector(12.0, 40.0), _vector(4.0, 55.0)])
    assert plan.target_g == pytest.approx(e_plus_t)
    assert len(plan.parts) == 1
    assert plan.parts[0].mass_g == pytest.approx(abs(e_plus_t))
    assert plan.parts[0].angle_deg == pytest.approx(math.degrees(cmath.phase(e_plus_t)))
    # Everything in the plane afterwards = weights before + trim.
    after = _vector(5.0, 200.0) + _vector(plan.parts[0].mass_g, plan.parts[0].angle_deg)
    assert after == pytest.approx(plan.combined_g)
    assert plan.combined_g == pytest.approx(np.sum([w.vector_g for w in on]) + trim)


def test_trim_far_from_every_weight_is_added_beside_them() -> None:
    plan = plan_trim(_vector(4.0, 150.0), [WeightOnRotor(7, _vector(12.0, 40.0))])
    assert plan.kind == "add" and plan.replaces is None
    assert plan.target_g == pytest.approx(_vector(4.0, 150.0))


def test_trim_with_stock_weights_reports_the_rounding_residual() -> None:
    on = [WeightOnRotor(1, _vector(12.0, 40.0))]
    trim = _vector(4.0, 55.0)
    plan = plan_trim(trim, on, available_g=[2, 5, 10, 20])
    target = _vector(12.0, 40.0) + trim  # 15.87 g: nearest stock sum is 15 (5 + 10)
    assert plan.parts[0].pieces_g == (5.0, 10.0)
    fitted = _vector(15.0, math.degrees(cmath.phase(target)))
    assert plan.residual_g == pytest.approx(target - fitted)
    assert abs(plan.residual_g) == pytest.approx(abs(target) - 15.0)


def test_trim_at_fixed_positions_changes_the_weights_there() -> None:
    # 8 positions at 45°: a weight of 16 g at position 3 (90°) and 8 g at position 4 (135°).
    earlier = _vector(16.0, 90.0) + _vector(8.0, 135.0)
    trim = _vector(3.0, 100.0)
    plan = plan_trim(trim, [WeightOnRotor(3, earlier)], positions=8)
    assert plan.kind == "replace" and plan.replaces == 3
    # Linearity of the two-position split (law of sines, by hand): the new masses are the
    # old ones plus the trim's parts, 3·sin35°/sin45° at 90° and 3·sin10°/sin45° at 135°.
    s45 = math.sin(math.radians(45))
    masses = {p.position: p.mass_g for p in plan.parts}
    assert masses[3] == pytest.approx(16.0 + 3 * math.sin(math.radians(35)) / s45)
    assert masses[4] == pytest.approx(8.0 + 3 * math.sin(math.radians(10)) / s45)
    # With stock sizes: what is fitted + the residual is the target (numpy vector sum).
    stocked = plan_trim(trim, [WeightOnRotor(3, earlier)], positions=8,
                        available_g=[1, 2, 5, 10])
    fitted = np.sum([_vector(sum(p.pieces_g), p.angle_deg) for p in stocked.parts])
    assert fitted + stocked.residual_g == pytest.approx(earlier + trim)


def test_bad_stock_list_is_named() -> None:
    with pytest.raises(BalancingInputError) as err:
        plan_trim(_vector(1.0, 0.0), [], available_g=[5, -1])
    assert err.value.field == "available_g"
