"""Balance tolerances: ISO 21940-11 formula and grades, allocation, API-style limit,
customer limits and the verdict on a residual."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from shopapp.balancing import tolerance as tol
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.units import convert_mass, convert_unbalance


def _iso_u_per(g_mm_s: float, mass_kg: float, n_rpm: float) -> float:
    # ISO 21940-11: U_per = 1000·G·m/Ω, Ω = 2π·n/60 (written out here independently).
    return 1000.0 * g_mm_s * mass_kg / (2.0 * math.pi * n_rpm / 60.0)


@pytest.mark.parametrize(
    ("g", "m", "n"),
    [(6.3, 120.0, 1480.0), (2.5, 1000.0, 3600.0), (0.4, 2.0, 24000.0), (40.0, 15.0, 900.0)],
)
def test_u_per_follows_iso_formula(g, m, n) -> None:
    assert_allclose(tol.permissible_unbalance(g, m, n), _iso_u_per(g, m, n), rtol=1e-14)


def test_e_per_g63_at_3000_rpm_is_about_20_um() -> None:
    # ISO 21940-11 chart of e_per against speed: G 6.3 at 3000 rpm reads about 20 µm
    # (value from memory); exact formula 1000·6.3/(2π·50) = 20.05 µm.
    e = tol.permissible_specific_unbalance(6.3, 3000.0)
    assert 19.9 < e < 20.2
    assert_allclose(e, 6300.0 / (100.0 * math.pi), rtol=1e-14)


def test_constant_is_30000_over_pi_not_9549() -> None:
    # ISO 21940-11: Ω = 2πn/60 exactly, so U_per·n/(G·m) = 30000/π = 9549.2966…
    k = tol.permissible_unbalance(1.0, 1.0, 1.0)
    assert_allclose(k, 30000.0 / math.pi, rtol=1e-15)
    assert abs(k - 9549.0) > 0.29


def test_grade_series_steps_by_about_2_5() -> None:
    # ISO 21940-11: grades G 0.4 … G 4000, each 2.5 times the one before; the printed
    # values are 10^(0.4k) rounded (observation, checked here within 1 %).
    assert tol.GRADE_VALUES_MM_S == (
        0.4,
        1.0,
        2.5,
        6.3,
        16.0,
        40.0,
        100.0,
        250.0,
        630.0,
        1600.0,
        4000.0,
    )
    ratios = np.diff(np.log(tol.GRADE_VALUES_MM_S))
    assert_allclose(np.exp(ratios), 2.5, rtol=0.02)
    ideal = 10.0 ** (0.4 * np.arange(-1, 10))
    assert_allclose(tol.GRADE_VALUES_MM_S, ideal, rtol=0.01)


@pytest.mark.parametrize(
    ("value", "example"),
    [
        (6.3, "fans"),
        (6.3, "pump impellers"),
        (2.5, "turbo-compressors"),
        (1.0, "grinding"),
        (0.4, "precision grinders"),
        (40.0, "car wheels"),
    ],
)
def test_grade_examples(value, example) -> None:
    # Typical rotors per grade: from memory of the ISO 21940-11 table
    # (docs/architecture.md, "Computations").
    assert any(example in text for text in tol.balance_grade(value).examples)


def test_grade_lookup_by_label() -> None:
    assert tol.balance_grade("G 6.3").grade_mm_s == 6.3
    assert tol.balance_grade("g2.5").grade_mm_s == 2.5


def test_symmetric_rotor_gets_half_per_bearing() -> None:
    # ISO 21940-11 allocation U_A = U·L_B/L: centre of mass midway gives halves.
    geo = tol.rotor_geometry(0.0, 800.0, 400.0)
    alloc = tol.allocate_to_bearings(1000.0, geo)
    assert_allclose([alloc.bearing_a_gmm, alloc.bearing_b_gmm], [500.0, 500.0])
    assert not alloc.clamped


def test_allocation_by_centre_of_mass() -> None:
    # ISO 21940-11: U_A = U·L_B/L = 1000·(800−320)/800 = 600, U_B = 1000·320/800 = 400.
    alloc = tol.allocate_to_bearings(1000.0, tol.rotor_geometry(0.0, 800.0, 320.0))
    assert_allclose([alloc.bearing_a_gmm, alloc.bearing_b_gmm], [600.0, 400.0])


@pytest.mark.parametrize(("com", "a", "b"), [(100.0, 700.0, 300.0), (780.0, 300.0, 700.0)])
def test_allocation_held_within_0_3_to_0_7(com, a, b) -> None:
    # ISO 21940-11 (from memory): each share between 0.3 and 0.7 of U_per for inboard rotors.
    alloc = tol.allocate_to_bearings(1000.0, tol.rotor_geometry(0.0, 800.0, com))
    assert_allclose([alloc.bearing_a_gmm, alloc.bearing_b_gmm], [a, b])
    assert alloc.clamped


def test_overhung_allocation_is_lever_rule() -> None:
    # Our method (statics, lever rule): static U at 1000 mm on bearings at 0/800 loads
    # A with U·200/800 and B with U·1000/800.
    alloc = tol.allocate_to_bearings(800.0, tol.rotor_geometry(0.0, 800.0, 1000.0))
    assert alloc.layout == "overhung"
    assert_allclose([alloc.bearing_a_gmm, alloc.bearing_b_gmm], [200.0, 1000.0])


def _bearing_loads(r1: complex, r2: complex, z1: float, z2: float, za: float, zb: float):
    # Independent rigid-shaft statics: solve R_A + R_B = Σu, R_A·z_A + R_B·z_B = Σu·z.
    return np.linalg.solve(np.array([[1.0, 1.0], [za, zb]]), np.array([r1 + r2, r1 * z1 + r2 * z2]))


GEOMETRIES = [
    tol.rotor_geometry(0.0, 800.0, 400.0, 150.0, 650.0),
    tol.rotor_geometry(0.0, 800.0, 250.0, 100.0, 700.0),
    tol.rotor_geometry(0.0, 800.0, 1000.0, 900.0, 1100.0),  # overhung disc pair
    tol.rotor_geometry(0.0, 600.0, 300.0, 280.0, 320.0),  # narrow rotor
]


@pytest.mark.parametrize("geo", GEOMETRIES)
@given(
    a1=st.floats(0, 2 * math.pi),
    a2=st.floats(0, 2 * math.pi),
    f1=st.floats(0, 1),
    f2=st.floats(0, 1),
)
def test_correction_plane_limits_keep_bearings_within_allocation(geo, a1, a2, f1, f2) -> None:
    # Property of our method, checked with independent statics: any residual within the
    # correction-plane limits, at any angles, stays within the bearing allocation.
    t = tol.iso_tolerance(6.3, 120.0, 1480.0, geo)
    r1 = f1 * t.plane_1_gmm * np.exp(1j * a1)
    r2 = f2 * t.plane_2_gmm * np.exp(1j * a2)
    ua, ub = _bearing_loads(
        r1, r2, geo.plane_1_mm, geo.plane_2_mm, geo.bearing_a_mm, geo.bearing_b_mm
    )
    assert abs(ua) <= t.bearing_a_gmm * (1 + 1e-9)
    assert abs(ub) <= t.bearing_b_gmm * (1 + 1e-9)


def test_correction_plane_limits_equal_allocation_when_planes_are_bearings() -> None:
    geo = tol.rotor_geometry(0.0, 800.0, 320.0, 0.0, 800.0)
    t = tol.iso_tolerance(6.3, 120.0, 1480.0, geo)
    assert_allclose([t.plane_1_gmm, t.plane_2_gmm], [t.bearing_a_gmm, t.bearing_b_gmm])


@pytest.mark.parametrize("geo", GEOMETRIES)
@given(
    a_s=st.floats(0, 2 * math.pi),
    a_c=st.floats(0, 2 * math.pi),
    fs=st.floats(0, 1),
    fc=st.floats(0, 1),
)
def test_static_and_couple_limits_keep_bearings_within_allocation(geo, a_s, a_c, fs, fc) -> None:
    # Property of our static/couple method, checked by statics: static S at the centre of
    # mass plus a couple moment M about it loads bearing A with (S·(z_B−z_c) − M)/(z_B−z_A).
    t = tol.iso_tolerance(6.3, 120.0, 1480.0, geo)
    s = fs * t.static_gmm * np.exp(1j * a_s)
    m = fc * t.couple_moment_gmm2 * np.exp(1j * a_c)
    za, zb, zc = geo.bearing_a_mm, geo.bearing_b_mm, geo.centre_of_mass_mm
    ua, ub = np.linalg.solve(np.array([[1.0, 1.0], [za - zc, zb - zc]]), np.array([s, m]))
    assert abs(ua) <= t.bearing_a_gmm * (1 + 1e-9)
    assert abs(ub) <= t.bearing_b_gmm * (1 + 1e-9)


def test_api_constant_from_unit_definitions() -> None:
    # API-style 4W/N oz·in with W in lb. Derivation from the 1959 unit definitions:
    # 4 oz·in = 4·28.349523125 g·25.4 mm = 2880.3115495 g·mm per lb of load per rpm;
    # per kg: 2880.3115495 / 0.45359237 = 6350 g·mm·rpm/kg (the constant API standards print).
    per_lb = 4.0 * 28.349523125 * 25.4
    assert_allclose(per_lb, 2880.3115495, rtol=1e-12)
    assert_allclose(per_lb / 0.45359237, 6350.0, rtol=1e-12)
    # The same through the module's own converters (oz·in → g·mm, kg → lb).
    via_units = convert_unbalance(4.0, "oz·in", "g·mm") * convert_mass(1.0, "kg", "lb")
    assert_allclose(tol.API_GMM_PER_KG_RPM, via_units, rtol=1e-13)
    assert_allclose(tol.API_GMM_PER_KG_RPM, 6350.0, rtol=1e-12)


def test_api_limit_example() -> None:
    # 6350·W/N: 250 kg journal load at 3600 rpm → 6350·250/3600 = 440.97 g·mm per plane;
    # the same as 4·W/N oz·in with W = 551.16 lb: 0.6124 oz·in = 440.97 g·mm.
    t = tol.api_tolerance(250.0, 3600.0)
    assert_allclose(t.plane_1_gmm, 6350.0 * 250.0 / 3600.0, rtol=1e-12)
    w_lb = 250.0 / 0.45359237
    assert_allclose(t.plane_1_gmm, 4.0 * w_lb / 3600.0 * 720.077887375, rtol=1e-12)
    assert t.reference == "correction_planes"


def test_customer_mass_at_radius() -> None:
    # Unbalance = mass × radius (definition): 2 g at 150 mm = 300 g·mm per plane.
    t = tol.customer_tolerance(mass_g=2.0, radius_mm=150.0)
    assert (t.plane_1_gmm, t.plane_2_gmm) == (300.0, 300.0)
    t2 = tol.customer_tolerance(400.0, 250.0)
    assert (t2.plane_1_gmm, t2.plane_2_gmm) == (400.0, 250.0)


def test_judge_residual_converts_to_bearing_planes() -> None:
    geo = tol.rotor_geometry(0.0, 800.0, 400.0, 150.0, 650.0)
    t = tol.iso_tolerance(6.3, 120.0, 1480.0, geo)
    r1, r2 = 1500.0 + 0j, 1500.0j
    verdict = tol.judge_residual(r1, r2, t, geo)
    ua, ub = _bearing_loads(r1, r2, 150.0, 650.0, 0.0, 800.0)  # independent statics
    assert_allclose(verdict.bearing_planes[0].residual_gmm, abs(ua))
    assert_allclose(verdict.bearing_planes[1].ratio, abs(ub) / t.bearing_b_gmm)
    assert verdict.passed == (abs(ua) <= t.bearing_a_gmm and abs(ub) <= t.bearing_b_gmm)
    assert verdict.reference == "bearing_planes"
    assert verdict.correction_planes is not None


def test_judge_residual_fails_above_limit() -> None:
    t = tol.customer_tolerance(100.0)
    v = tol.judge_residual(150.0 + 0j, 20.0 + 0j, t)
    assert not v.passed
    assert_allclose(v.worst_ratio, 1.5)
    assert v.correction_planes[1].passed


def test_batch_matches_single_verdicts() -> None:
    rng = np.random.default_rng(7)
    geo = tol.rotor_geometry(0.0, 800.0, 300.0, 100.0, 650.0)
    t = tol.iso_tolerance(6.3, 120.0, 1480.0, geo)
    res = (rng.normal(size=(50, 2)) + 1j * rng.normal(size=(50, 2))) * 1500.0
    tm = np.array([[(800 - 100) / 800, (800 - 650) / 800], [100 / 800, 650 / 800]])  # statics
    batch = tol.judge_residuals_batch(res, [t.bearing_a_gmm, t.bearing_b_gmm], transfer=tm)
    for k in range(50):
        v = tol.judge_residual(res[k, 0], res[k, 1], t, geo)
        assert_allclose(batch.ratio[k], [p.ratio for p in v.bearing_planes], rtol=1e-12)
        assert bool(batch.passed[k]) == v.passed


def test_batch_with_per_job_transfer_and_limits() -> None:
    res = np.array([[100.0, 0.0], [0.0, 100.0]], dtype=complex)
    limits = np.array([[100.0, 100.0], [50.0, 200.0]])
    eye = np.stack([np.eye(2), np.eye(2)])
    b = tol.judge_residuals_batch(res, limits, transfer=eye)
    assert_allclose(b.ratio, [[1.0, 0.0], [0.0, 0.5]])
    assert b.passed.tolist() == [True, True]
    assert b.passed_plane.shape == (2, 2)


BAD = [
    (lambda: tol.permissible_unbalance(7.0, 10.0, 1000.0), "grade_mm_s"),
    (lambda: tol.permissible_unbalance("G seven", 10.0, 1000.0), "grade_mm_s"),
    (lambda: tol.permissible_unbalance(float("nan"), 10.0, 1000.0), "grade_mm_s"),
    (lambda: tol.permissible_unbalance(6.3, 0.0, 1000.0), "mass_kg"),
    (lambda: tol.permissible_unbalance(6.3, -5.0, 1000.0), "mass_kg"),
    (lambda: tol.permissible_unbalance(6.3, float("inf"), 1000.0), "mass_kg"),
    (lambda: tol.permissible_unbalance(6.3, 10.0, 0.0), "service_speed_rpm"),
    (lambda: tol.permissible_unbalance(6.3, 10.0, float("nan")), "service_speed_rpm"),
    (lambda: tol.permissible_specific_unbalance(6.3, -1.0), "service_speed_rpm"),
    (lambda: tol.api_limit_gmm(0.0, 3600.0), "journal_load_kg"),
    (lambda: tol.api_limit_gmm(100.0, -3600.0), "service_speed_rpm"),
    (lambda: tol.api_tolerance(100.0, 3600.0, journal_load_b_kg=-1.0), "journal_load_b_kg"),
    (lambda: tol.customer_tolerance(mass_g=0.0, radius_mm=100.0), "mass_g"),
    (lambda: tol.customer_tolerance(mass_g=2.0, radius_mm=-1.0), "radius_mm"),
    (lambda: tol.customer_tolerance(mass_g=2.0), "radius_mm"),
    (lambda: tol.customer_tolerance(), "plane_1_gmm"),
    (lambda: tol.customer_tolerance(float("nan")), "plane_1_gmm"),
    (lambda: tol.rotor_geometry(0.0, 0.0, 10.0), "bearing_b_mm"),
    (lambda: tol.rotor_geometry(0.0, 800.0, float("nan")), "centre_of_mass_mm"),
    (lambda: tol.rotor_geometry(0.0, 800.0, 400.0, 100.0), "plane_2_mm"),
    (lambda: tol.rotor_geometry(0.0, 800.0, 400.0, 100.0, 100.0), "plane_2_mm"),
    (lambda: tol.judge_residual(complex("nan"), 0j, tol.customer_tolerance(1.0)), "residual_1_gmm"),
    (lambda: tol.judge_residuals_batch(np.zeros((3, 2)), [1.0, 0.0]), "limits_gmm"),
    (lambda: tol.judge_residuals_batch(np.zeros((3, 2)), np.ones((2, 2))), "limits_gmm"),
    (lambda: tol.judge_residuals_batch(np.full((3, 2), np.nan), [1.0, 1.0]), "residuals_gmm"),
    (lambda: tol.judge_residuals_batch(np.zeros(3), [1.0, 1.0]), "residuals_gmm"),
    (lambda: tol.judge_residuals_batch(np.zeros((3, 2)), 1.0, transfer=np.eye(3)), "transfer"),
]


@pytest.mark.parametrize(("call", "field"), BAD)
def test_bad_input_names_the_field(call, field) -> None:
    with pytest.raises(BalancingInputError) as err:
        call()
    assert err.value.field == field


# --- static and couple for overhung and narrow rotors (issue 11) -----------------------------


def _bearing_loads_numpy(r1: complex, r2: complex, za: float, zb: float, z1: float, z2: float
                         ) -> np.ndarray:
    """Rigid-rotor statics solved by numpy (force balance and moments about bearing A)."""
    a = np.array([[1.0, 1.0], [0.0, zb - za]], dtype=complex)
    return np.abs(np.linalg.solve(a, np.array([r1 + r2, r1 * (z1 - za) + r2 * (z2 - za)])))


def test_overhung_static_limit_decides_beside_the_bearing_planes() -> None:
    # Invented overhung fan: bearings 0/600, centre of mass 900, planes 780/1020.
    geo = tol.rotor_geometry(0.0, 600.0, 900.0, 780.0, 1020.0)
    t = tol.iso_tolerance(6.3, 310.0, 1480.0, geo)
    assert t.static_couple_judged and t.static_gmm is not None
    # A pure static residual at the centre of mass (no moment about it), 1.6 × the static
    # limit: split onto the planes by the lever rule about z_c.
    s = 1.6 * t.static_gmm
    r1, r2 = s * (1020.0 - 900.0) / 240.0, s * (900.0 - 780.0) / 240.0
    loads = _bearing_loads_numpy(r1, r2, 0.0, 600.0, 780.0, 1020.0)
    assert loads[0] <= t.bearing_a_gmm and loads[1] <= t.bearing_b_gmm  # bearings inside
    v = tol.judge_residual(r1, r2, t, geo)
    assert all(p.passed for p in v.bearing_planes)
    assert v.static_couple is not None
    static, couple = v.static_couple
    assert static.residual_gmm == pytest.approx(s) and not static.passed
    assert couple.residual_gmm == pytest.approx(0.0, abs=1e-9)
    assert not v.passed and v.worst_ratio == pytest.approx(1.6)


@pytest.mark.parametrize(("planes", "narrow"), [((170.0, 330.0), True), ((100.0, 400.0), False)])
def test_narrow_rotor_is_judged_for_static_and_couple(planes, narrow) -> None:  # type: ignore[no-untyped-def]
    # Value from memory: narrow when the planes are closer than a third of the bearing span.
    geo = tol.rotor_geometry(0.0, 500.0, 250.0, *planes)
    t = tol.iso_tolerance(6.3, 45.0, 1470.0, geo)
    assert geo.narrow is narrow and t.static_couple_judged is narrow
    assert any("narrow rotor" in n for n in t.notes) is narrow


def test_any_residual_within_static_and_couple_limits_keeps_the_bearings_within() -> None:
    # The docstring's claim checked by sampling against numpy statics (worst phases included).
    geo = tol.rotor_geometry(0.0, 600.0, 900.0, 780.0, 1020.0)
    t = tol.iso_tolerance(6.3, 310.0, 1480.0, geo)
    assert t.static_gmm is not None and t.couple_pair_gmm is not None
    rng = np.random.default_rng(11)
    m = tol.static_couple_matrix(geo)
    inv = np.linalg.inv(m)
    for _ in range(500):
        sc = np.array([t.static_gmm * rng.uniform(0, 1) * np.exp(1j * rng.uniform(0, 2 * np.pi)),
                       t.couple_pair_gmm * rng.uniform(0, 1)
                       * np.exp(1j * rng.uniform(0, 2 * np.pi))])
        r1, r2 = inv @ sc
        loads = _bearing_loads_numpy(r1, r2, 0.0, 600.0, 780.0, 1020.0)
        assert loads[0] <= t.bearing_a_gmm * (1 + 1e-9)
        assert loads[1] <= t.bearing_b_gmm * (1 + 1e-9)


def test_batch_verdict_with_the_judging_matrix_equals_the_single_verdict() -> None:
    geo = tol.rotor_geometry(0.0, 600.0, 900.0, 780.0, 1020.0)
    t = tol.iso_tolerance(6.3, 310.0, 1480.0, geo)
    rows, limits = tol.judging_matrix(t, geo)
    rng = np.random.default_rng(5)
    r = (rng.uniform(0, 1.5, (200, 2)) * t.static_gmm
         * np.exp(1j * rng.uniform(0, 2 * np.pi, (200, 2))))
    batch = tol.judge_residuals_batch(r, limits, rows)
    single = [tol.judge_residual(a, b, t, geo).passed for a, b in r]
    assert list(batch.passed) == single
    assert 0 < sum(single) < len(single)  # both outcomes occur
