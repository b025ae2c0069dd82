"""Run-up (or coast-down) records: critical speed, damping ratio and separation margin.

Input: readings ``(speed, amplitude, angle)`` at one sensor, angles in degrees in
the direction of rotation from the reference mark (the shopapp convention of
:mod:`shopapp.balancing.phasors`). Through a resonance the reading's angle falls
by about 180° (the phase lag grows).

Model, fitted to the complex readings (not to the amplitudes alone), one
resonance at a time::

    z(n) = Q · (i·n / n_ref)^p · r² / (1 − r² + 2iζr) + B,      r = n / n_c

``r² / (1 − r² + 2iζr)`` is the steady-state response of a Jeffcott rotor to a
rotating unbalance (vibration textbooks, e.g. Rao, *Mechanical Vibrations*,
rotating-unbalance section — from memory; the same formula as
:func:`shopapp.balancing.dynamics.jeffcott_response`). ``Q`` is the complex
unbalance response far above resonance, ``n_c`` the critical speed (undamped
natural frequency of the mode, where the lag is 90°), ζ the damping ratio,
``p`` = 0, 1, 2 for displacement, velocity or acceleration readings (each time
derivative multiplies by ``i·Ω``) and ``B`` a constant vector: runout left in
the readings and the almost constant contribution of lower modes. ``Q`` and
``B`` enter linearly and are solved for at every trial ``(n_c, ζ)``
(variable projection); ``(n_c, ζ)`` are fitted with
:func:`scipy.optimize.least_squares` from several starting points.

Definitions of this module:

* **amplification factor** from the fit ``AF = 1/(2ζ)`` (the quality factor
  Q of a lightly damped oscillator, textbook); from the measured curve by the
  half-power-band method ``AF = n_peak / (n₂ − n₁)`` where n₁, n₂ are the
  speeds at which the amplitude is ``peak/√2`` (API 684 style — from memory);
* **separation margin** ``SM = |n_op − n_c| / n_op · 100 %``, relative to the
  *operating* speed; with an operating range ``[n_min, n_max]`` relative to the
  nearer end (``n_min`` for a critical below the range, ``n_max`` above it) and
  0 % when the critical speed lies inside the range (API 684/617 style — from
  memory);
* **required margin** (API 684/617 style — from memory): AF < 2.5 counts as
  critically damped and needs no margin; for AF ≥ 2.5 a critical speed below
  the operating speed needs ``SM = 17·(1 − 1/(AF − 1.5)) %`` and one above it
  ``SM = min(10 + 17·(1 − 1/(AF − 1.5)), 26) %``. The required margin uses the
  half-power AF of the measured curve when it can be measured (that is how the
  rule defines AF), else the fitted one.

Rules of this module (judgement, no source): at least :data:`MIN_POINTS`
readings; peaks are local maxima of the runout-corrected amplitude standing out
by :data:`PEAK_PROMINENCE` of the largest amplitude (at most :data:`MAX_PEAKS`,
the most prominent); the fit residual is the RMS misfit of the vectors in
percent of the peak amplitude, "loose" above :data:`FIT_WARN_PCT` and "poor,
unreliable" above :data:`FIT_POOR_PCT`.

Safety: a run-up passes through resonances and may approach the permitted
speed; every result carries :data:`RUNUP_CAUTIONS`.
"""

from __future__ import annotations

import cmath
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares
from scipy.signal import find_peaks

from shopapp.balancing.checks import finite_array, positive
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.numtext import short

MIN_POINTS = 5
MIN_FIT_POINTS = 4
OFFSET_MIN_POINTS = 6
PEAK_PROMINENCE = 0.2
MAX_PEAKS = 4
FIT_WARN_PCT = 5.0
FIT_POOR_PCT = 15.0
HALF_POWER_MIN_POINTS = 3
AF_CRITICALLY_DAMPED = 2.5  # API 684/617 style, from memory
ZETA_BOUNDS = (1e-4, 1.0)
MEASURED_QUANTITIES = {"displacement": 0, "velocity": 1, "acceleration": 2}

RUNUP_CAUTIONS = (
    "Pass through a resonance briskly and never dwell at it: vibration there can damage "
    "bearings, seals and the rotor, and can loosen and throw correction masses; keep clear of "
    "the plane of rotation.",
    "Never run above the rotor's permitted speed or the machine maker's limits (over-speed), "
    "also not to complete a run-up record.",
    # The margin rule is quoted from memory of API practice (module docstring); the page
    # cites the practice only.
    "The separation-margin rule here is an API-style rule of common practice: where a "
    "standard, a contract or the machine maker sets the margin, theirs applies. Local codes "
    "and licensed practice take precedence over this advice.",
)


@dataclass(frozen=True)
class HalfPowerBand:
    """Result of :func:`half_power_band` (speeds in rpm).

    ``amplification_factor = peak_speed_rpm / (upper_speed_rpm − lower_speed_rpm)``;
    ``points_in_band`` counts the readings between the two half-power speeds.
    """

    peak_speed_rpm: float
    peak_amplitude: float
    lower_speed_rpm: float
    upper_speed_rpm: float
    amplification_factor: float
    points_in_band: int


@dataclass(frozen=True)
class ResonancePeak:
    """One resonance of a run-up record, fitted with the single-mode model.

    ``critical_speed_rpm`` is the fitted ``n_c`` (lag 90° of the mode);
    ``fitted_peak_speed_rpm`` where the fitted amplitude is largest and
    ``measured_peak_speed_rpm`` the reading with the largest amplitude.
    ``unbalance_response`` is ``Q`` and ``offset`` is ``B`` of the model (reading
    units, complex). ``separation_margin_pct`` / ``required_margin_pct`` /
    ``margin_ok`` are None without an operating speed. ``bracketed`` says whether
    readings lie on both sides of the fitted half-power band.
    ``fit_residual_pct`` is the RMS misfit of the vectors in percent of the
    largest reading of the peak's speed range; ``required_margin_basis`` says
    which AF the required margin used (``"half_power"`` or ``"fit"``).
    """

    critical_speed_rpm: float
    damping_ratio: float
    amplification_factor: float
    amplification_factor_half_power: float | None
    half_power: HalfPowerBand | None
    fitted_peak_speed_rpm: float
    measured_peak_speed_rpm: float
    measured_peak_amplitude: float
    separation_margin_pct: float | None
    required_margin_pct: float | None
    required_margin_basis: str
    margin_ok: bool | None
    critical_above_operating: bool | None
    fit_residual_pct: float
    unbalance_response: complex
    offset: complex
    bracketed: bool
    speed_range_rpm: tuple[float, float]
    points: int
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class RunupResult:
    """Result of :func:`analyse_runup`.

    ``peaks`` lists every resonance found, by speed; ``governing`` indexes the
    one nearest the operating speed (the first peak without one), and the
    top-level fields repeat that peak's values. ``speed_rpm``/``readings`` are
    the readings sorted by speed with the slow-roll vector subtracted.
    """

    peaks: tuple[ResonancePeak, ...]
    governing: int
    critical_speed_rpm: float
    damping_ratio: float
    amplification_factor: float
    amplification_factor_half_power: float | None
    separation_margin_pct: float | None
    required_margin_pct: float | None
    margin_ok: bool | None
    fit_residual_pct: float
    operating_speed_rpm: float | None
    operating_range_rpm: tuple[float, float] | None
    measured: str
    speed_rpm: np.ndarray
    readings: np.ndarray
    warnings: tuple[str, ...]
    cautions: tuple[str, ...]


@dataclass(frozen=True)
class BodeCurve:
    """Amplitude and angle against speed as plain lists (angle continuous, not wrapped)."""

    speed_rpm: list[float]
    amplitude: list[float]
    angle_deg: list[float]


@dataclass(frozen=True)
class RunupCurves:
    """Figure-ready data of a run-up: measured points and one fitted curve per peak."""

    measured: BodeCurve
    fitted: list[BodeCurve]
    critical_speeds_rpm: list[float]
    half_power_speeds_rpm: list[tuple[float, float] | None]
    operating_speed_rpm: float | None
    operating_range_rpm: tuple[float, float] | None


# --------------------------------------------------------------------------- rules


def required_margin_pct(amplification_factor: float, *, critical_above: bool = False) -> float:
    """Separation margin required for a resonance of amplification factor AF (percent).

    API 684/617 style rule (from memory): ``AF < 2.5`` is critically damped, no
    margin required; else ``SM = 17·(1 − 1/(AF − 1.5))`` for a critical speed
    below the operating speed and ``SM = min(10 + 17·(1 − 1/(AF − 1.5)), 26)``
    for one above it.

    Parameters
    ----------
    amplification_factor : float
        AF of the resonance, > 0.
    critical_above : bool
        True when the critical speed lies above the operating speed (range).
    """
    af = positive("amplification_factor", amplification_factor)
    if af < AF_CRITICALLY_DAMPED:
        return 0.0
    base = 17.0 * (1.0 - 1.0 / (af - 1.5))
    return min(10.0 + base, 26.0) if critical_above else base


def _operating(
    operating_speed_rpm: float | None, operating_range_rpm: Sequence[float] | None
) -> tuple[float | None, tuple[float, float] | None]:
    if operating_speed_rpm is not None and operating_range_rpm is not None:
        raise BalancingInputError(
            "operating_range_rpm", "give an operating speed or an operating range, not both"
        )
    speed = None
    if operating_speed_rpm is not None:
        speed = positive("operating_speed_rpm", operating_speed_rpm)
    span = None
    if operating_range_rpm is not None:
        arr = finite_array("operating_range_rpm", operating_range_rpm)
        if arr.shape != (2,) or arr.dtype.kind == "c":
            raise BalancingInputError("operating_range_rpm", "must be two speeds [lowest, highest]")
        lo = positive("operating_range_rpm[0]", arr[0])
        hi = positive("operating_range_rpm[1]", arr[1])
        if hi < lo:
            raise BalancingInputError(
                "operating_range_rpm", "the highest speed is below the lowest"
            )
        span = (lo, hi)
    return speed, span


def separation_margin_pct(
    critical_speed_rpm: float,
    operating_speed_rpm: float | None = None,
    operating_range_rpm: Sequence[float] | None = None,
) -> tuple[float, bool]:
    """Separation margin of a critical speed from the operating speed, percent.

    ``SM = |n_op − n_c| / n_op · 100`` (relative to the operating speed; API
    684/617 style — from memory). With a range ``[n_min, n_max]``:
    ``(n_min − n_c)/n_min·100`` below it, ``(n_c − n_max)/n_max·100`` above it,
    0 inside it.

    Returns
    -------
    margin_pct, critical_above : tuple[float, bool]
        The margin and whether the critical speed lies above the operating speed.
    """
    nc = positive("critical_speed_rpm", critical_speed_rpm)
    speed, span = _operating(operating_speed_rpm, operating_range_rpm)
    if speed is not None:
        return abs(speed - nc) / speed * 100.0, nc > speed
    if span is None:
        raise BalancingInputError("operating_speed_rpm", "is required (or operating_range_rpm)")
    lo, hi = span
    if nc < lo:
        return (lo - nc) / lo * 100.0, False
    if nc > hi:
        return (nc - hi) / hi * 100.0, True
    return 0.0, nc > 0.5 * (lo + hi)


# --------------------------------------------------------------------------- half-power band


def _crossing(n0: float, a0: float, n1: float, a1: float, level: float) -> float:
    return n0 + (level - a0) * (n1 - n0) / (a1 - a0)


def half_power_band(
    speed_rpm: Sequence[float] | np.ndarray, amplitude: Sequence[float] | np.ndarray
) -> HalfPowerBand | None:
    """Half-power band of the highest peak of a measured amplitude curve.

    The speeds n₁ < n_peak < n₂ where the amplitude is ``peak/√2`` are found by
    linear interpolation between neighbouring readings, and
    ``AF = n_peak / (n₂ − n₁)``. For a lightly damped oscillator
    ``(n₂ − n₁)/n_c ≈ 2ζ`` and ``AF ≈ Q = 1/(2ζ)`` (half-power bandwidth,
    vibration textbooks, e.g. Rao — from memory; API 684 uses it for the
    amplification factor — from memory).

    Parameters
    ----------
    speed_rpm : array_like
        Speeds, > 0, in increasing order.
    amplitude : array_like
        Amplitudes at those speeds, >= 0 (runout already subtracted).

    Returns
    -------
    HalfPowerBand or None
        None when the curve does not fall to ``peak/√2`` on both sides of its
        highest point.
    """
    n = finite_array("speed_rpm", speed_rpm)
    a = finite_array("amplitude", amplitude)
    if n.dtype.kind == "c" or a.dtype.kind == "c" or n.ndim != 1 or n.shape != a.shape:
        raise BalancingInputError("amplitude", "needs one real amplitude per speed")
    if n.size and (np.any(n <= 0.0) or np.any(np.diff(n) < 0.0)):
        raise BalancingInputError("speed_rpm", "must be positive and in increasing order")
    if np.any(a < 0.0):
        raise BalancingInputError("amplitude", "must not be negative")
    if n.size < 3:
        return None
    k = int(np.argmax(a))
    peak = float(a[k])
    if peak <= 0.0:
        return None
    level = peak / math.sqrt(2.0)
    lower = upper = None
    for j in range(k, 0, -1):
        if a[j - 1] <= level:
            lower = _crossing(n[j - 1], a[j - 1], n[j], a[j], level)
            break
    for j in range(k, n.size - 1):
        if a[j + 1] <= level:
            upper = _crossing(n[j], a[j], n[j + 1], a[j + 1], level)
            break
    if lower is None or upper is None or upper <= lower:
        return None
    inside = int(np.count_nonzero((n > lower) & (n < upper)))
    return HalfPowerBand(
        peak_speed_rpm=float(n[k]),
        peak_amplitude=peak,
        lower_speed_rpm=float(lower),
        upper_speed_rpm=float(upper),
        amplification_factor=float(n[k] / (upper - lower)),
        points_in_band=inside,
    )


# --------------------------------------------------------------------------- model and fit


def _mode_shape(
    speed_rpm: np.ndarray, nc: float, zeta: float, power: int, n_ref: float
) -> np.ndarray:
    """``(i·n/n_ref)^p · r²/(1 − r² + 2iζr)``, r = n/n_c.

    The complex form of :func:`shopapp.balancing.dynamics.jeffcott_response`
    (amplitude ratio and phase lag of the same textbook response), written out
    here because the fit evaluates it thousands of times.
    """
    r = speed_rpm / nc
    return r * r / (1.0 - r * r + 2j * zeta * r) * (1j * speed_rpm / n_ref) ** power


@dataclass(frozen=True)
class _Fit:
    nc: float
    zeta: float
    q: complex
    b: complex
    residual: np.ndarray


def _solve_linear(basis: np.ndarray, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    coef, *_ = np.linalg.lstsq(basis, z, rcond=None)
    return coef, z - basis @ coef


def _fit_mode(
    n: np.ndarray,
    z: np.ndarray,
    n_guess: float,
    power: int,
    with_offset: bool,
    scales: tuple[float, ...],
) -> _Fit:
    n_ref = float(n.max())
    lo_nc, hi_nc = 0.25 * float(n.min()), 4.0 * float(n.max())

    def basis(x: np.ndarray) -> np.ndarray:
        g = _mode_shape(n, math.exp(x[0]), math.exp(x[1]), power, n_ref)
        return np.column_stack([g, np.ones_like(g)]) if with_offset else g[:, None]

    def residual(x: np.ndarray) -> np.ndarray:
        _, res = _solve_linear(basis(x), z)
        return np.concatenate([res.real, res.imag])

    bounds = (
        [math.log(lo_nc), math.log(ZETA_BOUNDS[0])],
        [math.log(hi_nc), math.log(ZETA_BOUNDS[1])],
    )
    best = None
    for scale in scales:
        for zeta0 in (0.01, 0.05, 0.25):
            x0 = np.clip(
                [math.log(n_guess * scale), math.log(zeta0)],
                np.add(bounds[0], 1e-9),
                np.subtract(bounds[1], 1e-9),
            )
            sol = least_squares(residual, x0, bounds=bounds, x_scale=[0.05, 0.5])
            if best is None or sol.cost < best.cost:
                best = sol
    assert best is not None
    coef, res = _solve_linear(basis(best.x), z)
    b = complex(coef[1]) if with_offset else 0j
    return _Fit(math.exp(best.x[0]), math.exp(best.x[1]), complex(coef[0]), b, res)


def _peak_windows(amp: np.ndarray) -> list[tuple[int, int, int, bool]]:
    """``(peak, first, last, interior)`` index triples for every resonance in ``amp``."""
    top = float(amp.max())
    found, props = find_peaks(amp, prominence=PEAK_PROMINENCE * top)
    keep = np.sort(found[np.argsort(props["prominences"])[::-1][:MAX_PEAKS]])
    peaks = [(int(k), True) for k in keep]
    k_max = int(np.argmax(amp))
    if k_max in (0, amp.size - 1):
        # The largest reading is at an end of the record: a peak the data do not bracket.
        peaks.append((k_max, False))
    peaks.sort()
    windows = []
    for j, (k, interior) in enumerate(peaks):
        first = 0 if j == 0 else peaks[j - 1][0] + int(np.argmin(amp[peaks[j - 1][0] : k + 1]))
        last = (
            amp.size - 1
            if j == len(peaks) - 1
            else k + int(np.argmin(amp[k : peaks[j + 1][0] + 1]))
        )
        windows.append((k, first, last, interior))
    return windows


def _analyse_peak(
    n: np.ndarray,
    z: np.ndarray,
    window: tuple[int, int, int, bool],
    power: int,
    speed: float | None,
    span: tuple[float, float] | None,
) -> ResonancePeak | None:
    k, first, last, interior = window
    nw, zw = n[first : last + 1], z[first : last + 1]
    if nw.size < MIN_FIT_POINTS:
        return None
    warnings: list[str] = []
    with_offset = nw.size >= OFFSET_MIN_POINTS
    # Starting points: the peak reading; beyond the end for a peak at an end of the record.
    scales = (1.0,) if interior else ((1.0, 1.3, 1.7) if k == last else (1.0, 0.77, 0.6))
    fit = _fit_mode(nw, zw, float(n[k]), power, with_offset, scales)
    if not with_offset:
        warnings.append(
            f"only {nw.size} readings around this resonance: no constant offset (runout) "
            "was fitted; give the slow-roll reading or more readings"
        )
    rms = math.sqrt(float(np.mean(np.abs(fit.residual) ** 2)))
    rel_rms = 100.0 * rms / float(np.max(np.abs(zw)))
    nc, zeta = fit.nc, fit.zeta
    af_fit = 1.0 / (2.0 * zeta)
    band = half_power_band(nw, np.abs(zw))
    bracketed = interior and nw.min() < nc * (1.0 - zeta) and nw.max() > nc * (1.0 + zeta)
    if not bracketed:
        warnings.append(
            f"the readings ({nw.min():.0f}–{nw.max():.0f} rpm) do not bracket the resonance "
            f"near {nc:.0f} rpm: the critical speed and damping are extrapolated; record "
            "readings on both sides of the peak"
        )
    if band is None:
        warnings.append(
            "the amplitude does not fall to 0.707 of its peak on both sides: the half-power "
            "amplification factor cannot be measured"
        )
    elif band.points_in_band < HALF_POWER_MIN_POINTS:
        warnings.append(
            f"only {band.points_in_band} readings inside the half-power band: record more "
            "closely spaced speeds through the resonance for a reliable damping estimate"
        )
    if band is not None and not math.isclose(band.amplification_factor, af_fit, rel_tol=0.3):
        warnings.append(
            f"the amplification factor from the fit ({af_fit:.1f}) and from the half-power "
            f"band ({band.amplification_factor:.1f}) differ by more than 30 %"
        )
    if rel_rms > FIT_POOR_PCT:
        warnings.append(
            f"poor fit (residual {rel_rms:.0f} % of the peak): a single resonance does not "
            "describe these readings; the results are unreliable"
        )
    elif rel_rms > FIT_WARN_PCT:
        warnings.append(f"loose fit (residual {rel_rms:.0f} % of the peak)")
    if zeta >= 0.99 * ZETA_BOUNDS[1] or zeta <= 1.01 * ZETA_BOUNDS[0]:
        warnings.append(f"the damping ratio ran to the limit of the fit ({short(zeta, 4)})")
    lo_nc, hi_nc = 0.25 * float(nw.min()), 4.0 * float(nw.max())
    if nc <= 1.01 * lo_nc or nc >= 0.99 * hi_nc:
        warnings.append("the critical speed ran to the limit of the fit: not determined")

    grid = np.linspace(nw.min(), nw.max(), 400)
    fitted_amp = np.abs(fit.q * _mode_shape(grid, nc, zeta, power, float(nw.max())) + fit.b)
    margin = required = ok = above = None
    basis = "half_power" if band is not None else "fit"
    if speed is not None or span is not None:
        margin, above = separation_margin_pct(nc, speed, span)
        af_used = band.amplification_factor if band is not None else af_fit
        required = required_margin_pct(af_used, critical_above=above)
        ok = margin >= required
        if not ok:
            warnings.append(
                f"separation margin {margin:.1f} % is below the {required:.1f} % required for "
                f"AF {af_used:.1f}: the operating speed is too close to this resonance"
            )
    return ResonancePeak(
        critical_speed_rpm=nc,
        damping_ratio=zeta,
        amplification_factor=af_fit,
        amplification_factor_half_power=None if band is None else band.amplification_factor,
        half_power=band,
        fitted_peak_speed_rpm=float(grid[int(np.argmax(fitted_amp))]),
        measured_peak_speed_rpm=float(n[k]),
        measured_peak_amplitude=float(abs(z[k])),
        separation_margin_pct=margin,
        required_margin_pct=required,
        required_margin_basis=basis,
        margin_ok=ok,
        critical_above_operating=above,
        fit_residual_pct=rel_rms,
        unbalance_response=fit.q,
        offset=fit.b,
        bracketed=bool(bracketed),
        speed_range_rpm=(float(nw.min()), float(nw.max())),
        points=int(nw.size),
        warnings=tuple(warnings),
    )


def _phasor_value(field: str, value: complex) -> complex:
    try:
        out = complex(value)
    except (TypeError, ValueError):
        raise BalancingInputError(field, "must be a reading (amplitude and angle)") from None
    if not cmath.isfinite(out):
        raise BalancingInputError(field, "must be finite")
    return out


def analyse_runup(
    speed_rpm: Sequence[float] | np.ndarray,
    amplitude: Sequence[float] | np.ndarray,
    angle_deg: Sequence[float] | np.ndarray,
    *,
    slow_roll: complex | None = None,
    operating_speed_rpm: float | None = None,
    operating_range_rpm: Sequence[float] | None = None,
    measured: str = "displacement",
) -> RunupResult:
    """Critical speed(s), damping and separation margin from a run-up record.

    Each resonance is fitted with the single-mode Jeffcott model
    ``z = Q·(i·n/n_ref)^p · r²/(1 − r² + 2iζr) + B`` (rotating-unbalance
    response, Rao — from memory) by complex least squares; see the module
    docstring for the amplification factor, separation margin and required
    margin (API 684/617 style — from memory).

    Parameters
    ----------
    speed_rpm : array_like
        Speeds of the readings, > 0, any order (sorted here).
    amplitude : array_like
        Amplitudes, >= 0, one per speed, in any one unit.
    angle_deg : array_like
        Angles in degrees in the direction of rotation from the reference mark.
    slow_roll : complex, optional
        Slow-roll (runout) reading as a phasor, subtracted from every reading.
    operating_speed_rpm : float, optional
        Operating speed; or
    operating_range_rpm : (float, float), optional
        Lowest and highest operating speed.
    measured : str
        ``"displacement"`` (default), ``"velocity"`` or ``"acceleration"``.

    Raises
    ------
    BalancingInputError
        Fewer than :data:`MIN_POINTS` readings, mismatched lengths, a speed
        <= 0, a negative amplitude, NaN or infinite values.
    """
    if measured not in MEASURED_QUANTITIES:
        raise BalancingInputError(
            "measured", f"must be one of {', '.join(MEASURED_QUANTITIES)}, got {measured!r}"
        )
    n = finite_array("speed_rpm", speed_rpm)
    a = finite_array("amplitude", amplitude)
    ang = finite_array("angle_deg", angle_deg)
    if any(arr.dtype.kind == "c" or arr.ndim != 1 for arr in (n, a, ang)):
        raise BalancingInputError("points", "speeds, amplitudes and angles must be real lists")
    if not n.size == a.size == ang.size:
        raise BalancingInputError("points", "give a speed, an amplitude and an angle per reading")
    if n.size < MIN_POINTS:
        raise BalancingInputError(
            "points",
            f"at least {MIN_POINTS} readings are needed to fit a resonance, got {n.size}",
        )
    if np.any(n <= 0.0):
        raise BalancingInputError("speed_rpm", "every speed must be greater than zero")
    if np.any(a < 0.0):
        raise BalancingInputError("amplitude", "amplitudes must not be negative")
    speed, span = _operating(operating_speed_rpm, operating_range_rpm)
    order = np.argsort(n, kind="stable")
    n = n[order].astype(float)
    z = (a * np.exp(1j * np.radians(ang)))[order]
    warnings: list[str] = []
    if slow_roll is not None:
        z = z - _phasor_value("slow_roll", slow_roll)
    else:
        warnings.append(
            "no slow-roll reading given: runout stays in the readings (a constant offset is "
            "fitted instead)"
        )
    if float(np.ptp(n)) <= 0.0:
        raise BalancingInputError("speed_rpm", "the readings must span a range of speeds")
    amp = np.abs(z)
    if float(amp.max()) <= 0.0:
        raise BalancingInputError("amplitude", "all readings are zero")

    peaks: list[ResonancePeak] = []
    for window in _peak_windows(amp):
        peak = _analyse_peak(n, z, window, MEASURED_QUANTITIES[measured], speed, span)
        if peak is None:
            warnings.append(
                f"too few readings around the peak near {n[window[0]]:.0f} rpm to fit it"
            )
        else:
            peaks.append(peak)
    if not peaks:
        raise BalancingInputError(
            "points", "too few readings around the resonance to fit it; record more speeds"
        )
    if speed is not None or span is not None:
        ref = speed if speed is not None else 0.5 * (span[0] + span[1])  # type: ignore[index]
        governing = int(np.argmin([abs(p.critical_speed_rpm - ref) for p in peaks]))
    else:
        governing = 0
        warnings.append("no operating speed given: no separation margin")
    g = peaks[governing]
    for j, p in enumerate(peaks):
        label = f"resonance {j + 1} ({p.critical_speed_rpm:.0f} rpm): " if len(peaks) > 1 else ""
        warnings.extend(label + w for w in p.warnings)
    return RunupResult(
        peaks=tuple(peaks),
        governing=governing,
        critical_speed_rpm=g.critical_speed_rpm,
        damping_ratio=g.damping_ratio,
        amplification_factor=g.amplification_factor,
        amplification_factor_half_power=g.amplification_factor_half_power,
        separation_margin_pct=g.separation_margin_pct,
        required_margin_pct=g.required_margin_pct,
        margin_ok=None if g.margin_ok is None else all(p.margin_ok for p in peaks),
        fit_residual_pct=g.fit_residual_pct,
        operating_speed_rpm=speed,
        operating_range_rpm=span,
        measured=measured,
        speed_rpm=n,
        readings=z,
        warnings=tuple(warnings),
        cautions=RUNUP_CAUTIONS,
    )


def _continuous_deg(z: np.ndarray) -> np.ndarray:
    out = np.degrees(np.unwrap(np.angle(z)))
    return out - 360.0 * math.floor(out[0] / 360.0) if out.size else out


def runup_curves(result: RunupResult, points: int = 200) -> RunupCurves:
    """Bode data (amplitude and angle against speed) of a run-up, measured and fitted.

    Angles are continuous along the speed (unwrapped), the measured curve
    starting in [0, 360); each fitted curve is shifted by whole turns to lie
    on the measured curve's branch. Fitted curves span their peak's readings.
    """
    if points < 2:
        raise BalancingInputError("points", "must be at least 2")
    meas_deg = _continuous_deg(result.readings)
    fitted = []
    power = MEASURED_QUANTITIES[result.measured]
    for p in result.peaks:
        lo, hi = p.speed_range_rpm
        grid = np.linspace(lo, hi, points)
        zf = (
            p.unbalance_response
            * _mode_shape(grid, p.critical_speed_rpm, p.damping_ratio, power, hi)
            + p.offset
        )
        deg = np.degrees(np.unwrap(np.angle(zf)))
        k = int(np.argmin(np.abs(result.speed_rpm - lo)))
        deg = deg + 360.0 * round((meas_deg[k] - deg[0]) / 360.0)
        fitted.append(BodeCurve(grid.tolist(), np.abs(zf).tolist(), deg.tolist()))
    return RunupCurves(
        measured=BodeCurve(
            result.speed_rpm.tolist(), np.abs(result.readings).tolist(), meas_deg.tolist()
        ),
        fitted=fitted,
        critical_speeds_rpm=[p.critical_speed_rpm for p in result.peaks],
        half_power_speeds_rpm=[
            None
            if p.half_power is None
            else (p.half_power.lower_speed_rpm, p.half_power.upper_speed_rpm)
            for p in result.peaks
        ],
        operating_speed_rpm=result.operating_speed_rpm,
        operating_range_rpm=result.operating_range_rpm,
    )
