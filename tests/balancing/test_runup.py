"""Run-up records: critical speed, damping, amplification factor and separation margin.

Synthetic records are made here from the textbook rotating-unbalance response of
a Jeffcott rotor, written out independently of the code under test:
X/Q = r² / (1 − r² + 2iζr), r = n/n_c (Rao, *Mechanical Vibrations*, rotating
unbalance; Thomson, *Theory of Vibration with Applications* — from memory). In
the shopapp angle convention (degrees in the direction of rotation) the
response's angle is arg X, which falls by 180° through the resonance.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.runup import (
    analyse_runup,
    half_power_band,
    required_margin_pct,
    runup_curves,
    separation_margin_pct,
)

NC = 3000.0
Q = 40.0 * np.exp(1j * np.radians(250.0))  # response far above resonance, µm
RUNOUT = 15.0 * np.exp(1j * np.radians(70.0))


def _jeffcott(speed_rpm, nc=NC, zeta=0.05, q=Q):
    """Textbook rotating-unbalance response (Rao — from memory), complex."""
    r = np.asarray(speed_rpm, dtype=float) / nc
    return q * r**2 / (1.0 - r**2 + 2j * zeta * r)


def _record(z):
    return np.abs(z), np.degrees(np.angle(z))


def _noise(size, level, seed):
    rng = np.random.default_rng(seed)
    return level * (rng.normal(size=size) + 1j * rng.normal(size=size)) / math.sqrt(2.0)


@pytest.mark.parametrize("zeta", [0.02, 0.05, 0.1, 0.2])
def test_exact_record_gives_back_critical_speed_and_damping(zeta) -> None:
    speeds = np.linspace(500.0, 6000.0, 120)
    amp, ang = _record(_jeffcott(speeds, zeta=zeta))
    res = analyse_runup(speeds, amp, ang, operating_speed_rpm=4200.0)
    assert len(res.peaks) == 1
    assert res.critical_speed_rpm == pytest.approx(NC, rel=1e-6)
    assert res.damping_ratio == pytest.approx(zeta, rel=1e-5)
    # Quality factor of a lightly damped oscillator Q = 1/(2ζ) (textbook, from memory).
    assert res.amplification_factor == pytest.approx(1.0 / (2.0 * zeta), rel=1e-5)
    assert res.fit_residual_pct < 1e-6
    assert abs(res.peaks[0].unbalance_response - Q) < 1e-6 * abs(Q)


@pytest.mark.parametrize("zeta", [0.03, 0.1])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_noisy_record_with_runout_and_slow_roll(zeta, seed) -> None:
    # Runout is a vector constant in the rotor frame; the slow-roll reading at
    # 5 % of the critical speed is subtracted (common shop practice, no source).
    # Noise: complex Gaussian of 3 % of the peak amplitude.
    speeds = np.linspace(600.0, 6000.0, 46)
    peak = abs(Q) / (2.0 * zeta)
    z = _jeffcott(speeds, zeta=zeta) + RUNOUT + _noise(speeds.size, 0.03 * peak, seed)
    slow_roll = complex(_jeffcott(150.0, zeta=zeta) + RUNOUT)
    res = analyse_runup(speeds, *_record(z), slow_roll=slow_roll)
    # Bounds measured over 20 seeds: |Δn_c| < 0.4 %, |Δζ| < 5 %; stated with margin.
    assert res.critical_speed_rpm == pytest.approx(NC, rel=0.01)
    assert res.damping_ratio == pytest.approx(zeta, rel=0.10)
    assert 1.0 < res.fit_residual_pct < 6.0  # the noise level shows in the residual


def test_runout_without_slow_roll_is_taken_up_by_the_offset() -> None:
    speeds = np.linspace(600.0, 6000.0, 46)
    z = _jeffcott(speeds, zeta=0.05) + RUNOUT
    res = analyse_runup(speeds, *_record(z))
    assert res.critical_speed_rpm == pytest.approx(NC, rel=1e-6)
    assert res.damping_ratio == pytest.approx(0.05, rel=1e-5)
    assert abs(res.peaks[0].offset - RUNOUT) < 1e-6 * abs(RUNOUT)
    assert any("slow-roll" in w for w in res.warnings)


def test_readings_in_any_order() -> None:
    speeds = np.linspace(500.0, 6000.0, 60)
    amp, ang = _record(_jeffcott(speeds))
    order = np.random.default_rng(3).permutation(speeds.size)
    res = analyse_runup(speeds[order], amp[order], ang[order])
    assert res.critical_speed_rpm == pytest.approx(NC, rel=1e-6)


def test_velocity_readings() -> None:
    # A velocity pickup reads iΩ·X: 90° ahead of the displacement, amplitude ∝ Ω
    # (differentiation of a harmonic, textbook).
    speeds = np.linspace(500.0, 6000.0, 80)
    omega = speeds * math.pi / 30.0
    z = 1j * omega * _jeffcott(speeds, zeta=0.08) * 1e-3
    res = analyse_runup(speeds, *_record(z), measured="velocity")
    assert res.critical_speed_rpm == pytest.approx(NC, rel=1e-6)
    assert res.damping_ratio == pytest.approx(0.08, rel=1e-5)


@pytest.mark.parametrize("zeta", [0.01, 0.03, 0.1])
def test_half_power_band_of_a_forced_oscillator(zeta) -> None:
    # Constant-force oscillator |X| ∝ 1/√((1 − r²)² + (2ζr)²): the half-power
    # frequencies are r₁,₂² = 1 − 2ζ² ∓ 2ζ√(1 − ζ²), so Δω/ωn ≈ 2ζ and
    # Q = 1/(2ζ) (Rao, half-power points — from memory).
    r = np.linspace(0.5, 1.5, 20001)
    amp = 1.0 / np.hypot(1.0 - r**2, 2.0 * zeta * r)
    band = half_power_band(r * NC, amp)
    assert band is not None
    r1 = math.sqrt(1.0 - 2.0 * zeta**2 - 2.0 * zeta * math.sqrt(1.0 - zeta**2))
    r2 = math.sqrt(1.0 - 2.0 * zeta**2 + 2.0 * zeta * math.sqrt(1.0 - zeta**2))
    assert band.lower_speed_rpm == pytest.approx(r1 * NC, rel=1e-6)
    assert band.upper_speed_rpm == pytest.approx(r2 * NC, rel=1e-6)
    assert (band.upper_speed_rpm - band.lower_speed_rpm) / NC == pytest.approx(
        2.0 * zeta, rel=2.0 * zeta
    )
    assert band.amplification_factor == pytest.approx(1.0 / (2.0 * zeta), rel=2.0 * zeta)


def test_half_power_needs_both_sides() -> None:
    r = np.linspace(0.5, 0.98, 50)
    assert half_power_band(r * NC, 1.0 / np.hypot(1.0 - r**2, 0.1 * r)) is None


def test_half_power_of_the_record_matches_the_fit_when_lightly_damped() -> None:
    speeds = np.linspace(2000.0, 4000.0, 401)
    res = analyse_runup(speeds, *_record(_jeffcott(speeds, zeta=0.02)))
    # Q = 1/(2ζ) = 25 (textbook); the r² of the unbalance response shifts it by O(ζ).
    assert res.amplification_factor_half_power == pytest.approx(25.0, rel=0.05)


def test_api_required_margin_rule() -> None:
    # API 684/617 style (from memory): AF < 2.5 critically damped, no margin;
    # below the operating speed SM = 17·(1 − 1/(AF − 1.5)); above it
    # SM = 10 + 17·(1 − 1/(AF − 1.5)), at most 26. Values worked by hand.
    assert required_margin_pct(2.0) == 0.0
    assert required_margin_pct(2.5) == pytest.approx(0.0)
    assert required_margin_pct(5.0) == pytest.approx(17.0 * 2.5 / 3.5)  # 12.14 %
    assert required_margin_pct(11.5) == pytest.approx(15.3)
    assert required_margin_pct(5.0, critical_above=True) == pytest.approx(22.142857, rel=1e-6)
    assert required_margin_pct(100.0, critical_above=True) == 26.0
    assert required_margin_pct(1e9) == pytest.approx(17.0)


def test_separation_margin_definition() -> None:
    # Percent of the operating speed (API 684 style — from memory).
    assert separation_margin_pct(3000.0, 3600.0) == (pytest.approx(100.0 * 600 / 3600), False)
    assert separation_margin_pct(4000.0, 3600.0) == (pytest.approx(100.0 * 400 / 3600), True)
    assert separation_margin_pct(2500.0, operating_range_rpm=(3000.0, 3600.0))[0] == (
        pytest.approx(100.0 * 500 / 3000)
    )
    assert separation_margin_pct(4000.0, operating_range_rpm=(3000.0, 3600.0))[0] == (
        pytest.approx(100.0 * 400 / 3600)
    )
    assert separation_margin_pct(3300.0, operating_range_rpm=(3000.0, 3600.0))[0] == 0.0


def test_margin_verdict_end_to_end() -> None:
    speeds = np.linspace(1000.0, 5000.0, 161)
    z = _jeffcott(speeds, zeta=0.05)
    res = analyse_runup(speeds, *_record(z), operating_speed_rpm=3300.0)
    assert res.separation_margin_pct == pytest.approx(100.0 * 300.0 / 3300.0, rel=1e-5)
    af = res.amplification_factor_half_power
    assert af is not None and 8.0 < af < 11.0  # ≈ 1/(2ζ) = 10
    assert res.required_margin_pct == pytest.approx(17.0 * (1.0 - 1.0 / (af - 1.5)))
    assert res.margin_ok is False  # 9.1 % < ~14.9 %
    assert any("too close" in w for w in res.warnings)
    far = analyse_runup(speeds, *_record(z), operating_speed_rpm=4500.0)
    assert far.margin_ok is True


def test_two_resonances_each_fitted() -> None:
    speeds = np.linspace(300.0, 9000.0, 175)
    z = _jeffcott(speeds, nc=2000.0, zeta=0.05) + _jeffcott(
        speeds, nc=6000.0, zeta=0.03, q=30.0 * np.exp(2j)
    )
    res = analyse_runup(speeds, *_record(z), operating_speed_rpm=4000.0)
    assert len(res.peaks) == 2
    # Single-mode fits, the other mode a background: measured 0.1 % on both n_c,
    # 1.9 % and 1.1 % on ζ; the bounds leave room.
    assert res.peaks[0].critical_speed_rpm == pytest.approx(2000.0, rel=0.01)
    assert res.peaks[1].critical_speed_rpm == pytest.approx(6000.0, rel=0.01)
    assert res.peaks[0].damping_ratio == pytest.approx(0.05, rel=0.1)
    assert res.peaks[1].damping_ratio == pytest.approx(0.03, rel=0.1)
    # Both critical speeds are 2000 rpm from the operating speed: margins of 50 %.
    assert res.separation_margin_pct == pytest.approx(50.0, rel=0.05)


def test_record_that_does_not_bracket_the_peak_warns_and_stays_finite() -> None:
    speeds = np.linspace(300.0, 2500.0, 20)  # all below the 3000 rpm resonance
    res = analyse_runup(speeds, *_record(_jeffcott(speeds)), operating_speed_rpm=2000.0)
    assert any("do not bracket" in w for w in res.warnings)
    assert res.amplification_factor_half_power is None
    for value in (res.critical_speed_rpm, res.damping_ratio, res.separation_margin_pct):
        assert value is not None and math.isfinite(value)
    above = np.linspace(3500.0, 8000.0, 20)
    res2 = analyse_runup(above, *_record(_jeffcott(above)))
    assert any("do not bracket" in w for w in res2.warnings)
    assert math.isfinite(res2.critical_speed_rpm)


def test_poor_fit_is_reported() -> None:
    speeds = np.linspace(500.0, 6000.0, 60)
    z = _jeffcott(speeds) + _noise(speeds.size, 0.3 * abs(Q) / 0.1, seed=7)
    res = analyse_runup(speeds, *_record(z))
    assert res.fit_residual_pct > 15.0
    assert any("poor fit" in w for w in res.warnings)


def test_curves_are_figure_ready() -> None:
    speeds = np.linspace(500.0, 6000.0, 60)
    res = analyse_runup(speeds, *_record(_jeffcott(speeds, zeta=0.05)))
    curves = runup_curves(res, points=300)
    assert len(curves.measured.speed_rpm) == 60
    fit = curves.fitted[0]
    assert len(fit.speed_rpm) == len(fit.amplitude) == len(fit.angle_deg) == 300
    # Angles continuous and falling by ~180° through the resonance (textbook lag).
    assert np.max(np.abs(np.diff(curves.measured.angle_deg))) < 90.0
    drop = curves.measured.angle_deg[0] - curves.measured.angle_deg[-1]
    assert 150.0 < drop < 180.0
    # Fitted curve passes through the exact readings.
    assert_allclose(
        np.interp(speeds, fit.speed_rpm, fit.amplitude), np.abs(_jeffcott(speeds)), rtol=2e-3
    )
    assert curves.critical_speeds_rpm[0] == pytest.approx(NC, rel=1e-6)
    assert all(isinstance(x, float) for x in fit.amplitude)


BAD = [
    (([3000.0], [1.0], [0.0]), {}, "points"),
    (([1000.0, 2000.0, 3000.0, 4000.0], [1.0] * 4, [0.0] * 4), {}, "points"),
    (([0.0, 1000.0, 2000.0, 3000.0, 4000.0], [1.0] * 5, [0.0] * 5), {}, "speed_rpm"),
    (([-5.0, 1000.0, 2000.0, 3000.0, 4000.0], [1.0] * 5, [0.0] * 5), {}, "speed_rpm"),
    (
        ([1000.0, 2000.0, 3000.0, 4000.0, 5000.0], [1, 2, float("nan"), 2, 1], [0] * 5),
        {},
        "amplitude",
    ),
    (([1000.0, 2000.0, 3000.0, 4000.0, 5000.0], [1, 2, -3, 2, 1], [0] * 5), {}, "amplitude"),
    (([1000.0, 2000.0, 3000.0, 4000.0, 5000.0], [1, 2, 3, 2], [0] * 5), {}, "points"),
    (([3000.0] * 6, [1, 2, 3, 2, 1, 1], [0] * 6), {}, "speed_rpm"),
    (([1000.0, 2000.0, 3000.0, 4000.0, 5000.0], [0] * 5, [0] * 5), {}, "amplitude"),
    (
        ([1000.0, 2000.0, 3000.0, 4000.0, 5000.0], [1, 2, 3, 2, 1], [0] * 5),
        {"operating_speed_rpm": 0.0},
        "operating_speed_rpm",
    ),
    (
        ([1000.0, 2000.0, 3000.0, 4000.0, 5000.0], [1, 2, 3, 2, 1], [0] * 5),
        {"operating_range_rpm": (3600.0, 3000.0)},
        "operating_range_rpm",
    ),
    (
        ([1000.0, 2000.0, 3000.0, 4000.0, 5000.0], [1, 2, 3, 2, 1], [0] * 5),
        {"measured": "sound"},
        "measured",
    ),
    (
        ([1000.0, 2000.0, 3000.0, 4000.0, 5000.0], [1, 2, 3, 2, 1], [0] * 5),
        {"slow_roll": complex("nan")},
        "slow_roll",
    ),
]


@pytest.mark.parametrize(("args", "kwargs", "field"), BAD)
def test_bad_input_names_the_field(args, kwargs, field) -> None:
    with pytest.raises(BalancingInputError) as info:
        analyse_runup(*args, **kwargs)
    assert info.value.field == field
