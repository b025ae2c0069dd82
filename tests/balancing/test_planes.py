"""Static/couple decomposition and transfer between plane pairs.

Reference: rigid-body statics (sum of forces and sum of moments vanish; any
statics textbook, e.g. Hibbeler, *Engineering Mechanics: Statics*), solved here
independently with numpy.linalg.solve, and ISO 21940-11 §4.2 (one unbalance
state has equivalent representations: two planes, or resultant plus couple).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import assume, given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from shopapp.balancing import planes
from shopapp.balancing.errors import BalancingInputError

finite_f = st.floats(min_value=-1e4, max_value=1e4, allow_nan=False)
vec = st.complex_numbers(max_magnitude=1e5, allow_nan=False, allow_infinity=False)
pos = st.floats(min_value=-2000, max_value=2000, allow_nan=False)


def _bearing_reactions(u: list[complex], z: list[float], za: float, zb: float) -> np.ndarray:
    """Bearing forces (per Ω²) of a rigid shaft carrying unbalances u at z.

    Independent model: solve the equilibrium of a shaft on two supports,
    R_A + R_B + Σu = 0 and R_A·z_A + R_B·z_B + Σu·z = 0 (statics), with
    numpy.linalg.solve. The equivalent unbalance in a bearing plane is −R.
    """
    a = np.array([[1.0, 1.0], [za, zb]])
    rhs = -np.array([sum(u), sum(ui * zi for ui, zi in zip(u, z, strict=True))])
    return -np.linalg.solve(a, rhs)


def test_bearing_equivalents_match_support_reactions() -> None:
    u1, u2 = 120.0 * np.exp(1j * 0.3), 80.0 * np.exp(1j * 2.1)
    ua, ub = planes.bearing_plane_equivalents(u1, u2, 150.0, 650.0, 0.0, 800.0)
    assert_allclose([ua, ub], _bearing_reactions([u1, u2], [150.0, 650.0], 0.0, 800.0))


def test_unbalance_in_a_bearing_plane_stays_there() -> None:
    # Statics: a force acting at a support is carried by that support alone.
    ua, ub = planes.bearing_plane_equivalents(100.0 + 0j, 0j, 0.0, 500.0, 0.0, 800.0)
    assert_allclose([ua, ub], [100.0, 0.0], atol=1e-12)


def test_overhung_unbalance_loads_far_bearing_opposite() -> None:
    # Lever rule for an overhung load (statics): 100 g·mm at 1000 mm on supports at 0 and 800
    # gives A = 100·(800−1000)/800 = −25, B = 100·1000/800 = 125.
    ua, ub = planes.bearing_plane_equivalents(100.0 + 0j, 0j, 1000.0, 1200.0, 0.0, 800.0)
    assert_allclose([ua, ub], [-25.0, 125.0])


@given(u1=vec, u2=vec, z1=pos, z2=pos, za=pos, zb=pos)
def test_transfer_keeps_force_and_moment(u1, u2, z1, z2, za, zb) -> None:
    # Rigid-body equivalence: same resultant and same moment about the datum.
    assume(abs(zb - za) > 1.0)
    ua, ub = planes.transfer_planes(u1, u2, z1, z2, za, zb)
    scale = abs(u1) + abs(u2) + 1.0
    assert abs((ua + ub) - (u1 + u2)) <= 1e-9 * scale * (1 + (abs(z1) + abs(z2)) / abs(zb - za))
    m_before = u1 * z1 + u2 * z2
    m_after = ua * za + ub * zb
    assert abs(m_after - m_before) <= 1e-8 * scale * 2000 * (1 + 4000 / abs(zb - za))


@given(u1=vec, u2=vec, z1=pos, z2=pos, za=pos, zb=pos)
def test_transfer_round_trip(u1, u2, z1, z2, za, zb) -> None:
    # Property (issue 3): moving to another plane pair and back is the identity.
    assume(abs(zb - za) > 10.0 and abs(z2 - z1) > 10.0)
    ua, ub = planes.transfer_planes(u1, u2, z1, z2, za, zb)
    b1, b2 = planes.transfer_planes(ua, ub, za, zb, z1, z2)
    cond = (1 + 4000 / abs(zb - za)) * (1 + 4000 / abs(z2 - z1))
    tol = 1e-10 * (abs(u1) + abs(u2) + 1.0) * cond
    assert abs(b1 - u1) <= tol
    assert abs(b2 - u2) <= tol


def test_transfer_works_on_arrays() -> None:
    u1 = np.array([1.0 + 1j, 2.0, -3j])
    u2 = np.array([0.5, 1j, 4.0])
    ua, ub = planes.transfer_planes(u1, u2, 100.0, 300.0, 0.0, 400.0)
    for k in range(3):
        assert_allclose([ua[k], ub[k]], _bearing_reactions([u1[k], u2[k]], [100, 300], 0, 400))


def test_midway_decomposition_is_half_sum_and_half_difference() -> None:
    # Shop definition of static/couple in the correction planes: S = U1 + U2 split in halves,
    # couple pair C = (U1 − U2)/2 (common practice; equivalent to ISO 21940-11 §4.2).
    u1, u2 = 30.0 + 40j, -10.0 + 5j
    sc = planes.static_couple(u1, u2, 100.0, 500.0)
    assert_allclose(sc.static_gmm, u1 + u2)
    assert_allclose(sc.couple_pair_gmm, (u1 - u2) / 2)
    assert_allclose([sc.static_in_plane_1_gmm, sc.static_in_plane_2_gmm], [(u1 + u2) / 2] * 2)
    # Moment about the midpoint 300 mm: U1·(−200) + U2·200.
    assert_allclose(sc.couple_moment_gmm2, -200 * u1 + 200 * u2)


def test_pure_couple_has_no_static_part() -> None:
    sc = planes.static_couple(50.0 + 0j, -50.0 + 0j, 0.0, 400.0, reference_mm=123.0)
    assert abs(sc.static_gmm) == 0.0
    # Moment of a pure couple is the same about every point: 50·0 + (−50)·400 = −20000.
    assert_allclose(sc.couple_moment_gmm2, -20000.0)


@given(u1=vec, u2=vec, z1=pos, z2=pos, zr=pos)
def test_static_plus_couple_recombine(u1, u2, z1, z2, zr) -> None:
    # Property (issue 3): static + couple recombine to the original two-plane unbalance.
    assume(abs(z2 - z1) > 1.0)
    sc = planes.static_couple(u1, u2, z1, z2, reference_mm=zr)
    tol = 1e-9 * (abs(u1) + abs(u2) + 1.0) * (1 + 4000 / abs(z2 - z1))
    b1 = sc.static_in_plane_1_gmm + sc.couple_pair_gmm
    b2 = sc.static_in_plane_2_gmm - sc.couple_pair_gmm
    assert abs(b1 - u1) <= tol and abs(b2 - u2) <= tol
    r1, r2 = planes.recombine(sc.static_gmm, sc.couple_moment_gmm2, z1, z2, reference_mm=zr)
    assert abs(r1 - u1) <= tol and abs(r2 - u2) <= tol


@given(u1=vec, u2=vec)
def test_midway_pair_recombines(u1, u2) -> None:
    sc = planes.static_couple(u1, u2, 0.0, 1.0)
    r1, r2 = planes.recombine_pair(sc.static_gmm, sc.couple_pair_gmm)
    tol = 1e-12 * (abs(u1) + abs(u2) + 1.0)
    assert abs(r1 - u1) <= tol and abs(r2 - u2) <= tol


@pytest.mark.parametrize(
    ("call", "field"),
    [
        (lambda: planes.transfer_planes(1.0, 1.0, 0, 100, 50, 50), "new_plane_2_mm"),
        (lambda: planes.transfer_planes(float("nan"), 1.0, 0, 100, 0, 50), "u1_gmm"),
        (lambda: planes.transfer_planes(1.0, complex("inf"), 0, 100, 0, 50), "u2_gmm"),
        (lambda: planes.transfer_planes(1.0, 1.0, float("inf"), 100, 0, 50), "plane_1_mm"),
        (lambda: planes.bearing_plane_equivalents(1.0, 1.0, 0, 100, 30, 30), "bearing_b_mm"),
        (lambda: planes.bearing_plane_equivalents(1.0, 1.0, 0, 100, "x", 30), "bearing_a_mm"),
        (lambda: planes.static_couple(1.0, 1.0, 10, 10), "plane_2_mm"),
        (lambda: planes.static_couple(1.0, 1.0, 0, 10, reference_mm=float("nan")), "reference_mm"),
        (lambda: planes.recombine(1.0, float("nan"), 0, 10), "couple_moment_gmm2"),
        (lambda: planes.recombine_pair("a", 1.0), "static_gmm"),
    ],
)
def test_bad_input_names_the_field(call, field) -> None:
    with pytest.raises(BalancingInputError) as err:
        call()
    assert err.value.field == field
