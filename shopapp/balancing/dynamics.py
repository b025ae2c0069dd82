"""Rotor dynamics the shop needs: rigid or flexible, Jeffcott response, balancing speed.

- Rigid/flexible: a rotor whose service speed exceeds about 70 % of its first
  bending critical speed is treated as flexible (common practice, no source);
  ISO 21940-11 tolerances then do not cover it on their own.
- Jeffcott (single-mass) rotor with unbalance eccentricity e: the steady-state
  whirl amplitude ``|X|/e = r² / √((1 − r²)² + (2ζr)²)`` and phase lag
  ``φ = atan2(2ζr, 1 − r²)`` of the response behind the unbalance, r = Ω/ωn
  (rotating-unbalance response in vibration textbooks, e.g. Rao, *Mechanical
  Vibrations*, or Thomson, *Theory of Vibration with Applications* — from
  memory).
- Balancing speed: soft-bearing machines measure well above the rotor-on-
  suspension resonance, hard-bearing machines well below it (common practice,
  factors below are ours).

Safety: balancing speeds never exceed the rotor's permitted speed, the machine
maker's limits or local rules; every advice carries that caution.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from shopapp.balancing.checks import finite_array, positive
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.numtext import short

FLEXIBLE_SPEED_FRACTION = 0.7  # common practice, no source
SOFT_BEARING_MIN_RATIO = 2.0  # common practice: at least 2× suspension resonance
SOFT_BEARING_GOOD_RATIO = 3.0  # common practice: 3× or more preferred
HARD_BEARING_MAX_RATIO = 1.0 / 3.0  # common practice: at most 1/3 of the resonance
MACHINE_TYPES = ("soft", "hard")

SPEED_CAUTION = (
    "Never run above the rotor's permitted speed or the balancing machine maker's limits; "
    "secure trial and correction masses and keep clear of the plane of rotation. Local codes, "
    "the machine maker's instructions and licensed practice take precedence over this advice."
)


@dataclass(frozen=True)
class RigidityCheck:
    """Result of :func:`rigid_or_flexible`."""

    speed_ratio: float
    threshold: float
    rigid: bool
    warnings: list[str] = field(default_factory=list)


def rigid_or_flexible(
    service_speed_rpm: float,
    first_critical_rpm: float,
    threshold: float = FLEXIBLE_SPEED_FRACTION,
) -> RigidityCheck:
    """Whether a rotor may be treated as rigid at its service speed.

    ``rigid = n_service / n_crit,1 <= threshold`` with threshold 0.7 by default
    (common practice, no source: a rotor running above about 70 % of its first
    bending critical speed behaves flexibly).

    Parameters
    ----------
    service_speed_rpm : float
        Maximum service speed, > 0.
    first_critical_rpm : float
        First bending critical speed of the rotor, > 0.
    threshold : float
        Fraction of the critical speed above which the rotor counts as flexible,
        0 < threshold < 1.
    """
    n = positive("service_speed_rpm", service_speed_rpm)
    nc = positive("first_critical_rpm", first_critical_rpm)
    th = positive("threshold", threshold)
    if th >= 1.0:
        raise BalancingInputError("threshold", f"must be below 1, got {short(th)}")
    ratio = n / nc
    rigid = ratio <= th
    warnings: list[str] = []
    if not rigid:
        warnings.append(
            f"service speed is {ratio:.0%} of the first bending critical speed (above "
            f"{th:.0%}): the rotor is not rigid; ISO 21940-11 tolerances alone do not cover "
            "it, balance it as a flexible rotor (ISO 21940-12 procedures)"
        )
    if ratio >= 1.0:
        warnings.append("the service speed is at or above the first bending critical speed")
    return RigidityCheck(ratio, th, rigid, warnings)


@dataclass(frozen=True)
class JeffcottResponse:
    """Steady-state unbalance response of a Jeffcott rotor.

    ``amplitude_ratio`` is |X|/e (whirl amplitude over mass eccentricity),
    ``phase_lag_deg`` the lag of the response behind the unbalance, 0…180°.
    Scalars for scalar input, arrays for array input.
    """

    amplitude_ratio: float | np.ndarray
    phase_lag_deg: float | np.ndarray


def jeffcott_response(
    speed_ratio: float | np.ndarray, damping_ratio: float | np.ndarray
) -> JeffcottResponse:
    """Amplitude ratio and phase lag of a Jeffcott rotor.

    ``|X|/e = r² / √((1 − r²)² + (2ζr)²)``, ``φ = atan2(2ζr, 1 − r²)``, with
    ``r = Ω/ωn`` and ζ the damping ratio (rotating-unbalance forced response,
    e.g. Rao, *Mechanical Vibrations* — from memory). Below resonance the
    response is nearly in phase with the unbalance, 90° behind at r = 1, and
    tends to 180° (rotation about the centre of mass, |X| → e) well above it.

    Raises
    ------
    BalancingInputError
        ``speed_ratio`` or ``damping_ratio`` negative or not finite; undamped
        resonance (ζ = 0 at r = 1, unbounded amplitude) on ``"speed_ratio"``.
    """
    r = finite_array("speed_ratio", speed_ratio)
    z = finite_array("damping_ratio", damping_ratio)
    if r.dtype.kind == "c" or np.any(r < 0.0):
        raise BalancingInputError("speed_ratio", "must be real and not negative")
    if z.dtype.kind == "c" or np.any(z < 0.0):
        raise BalancingInputError("damping_ratio", "must be real and not negative")
    try:
        r, z = np.broadcast_arrays(r, z)
    except ValueError:
        raise BalancingInputError("damping_ratio", "shape does not fit speed_ratio") from None
    denom = np.hypot(1.0 - r * r, 2.0 * z * r)
    if np.any(denom == 0.0):
        raise BalancingInputError(
            "speed_ratio", "undamped resonance (r = 1 with zero damping): amplitude is unbounded"
        )
    amp = r * r / denom
    lag = np.degrees(np.arctan2(2.0 * z * r, 1.0 - r * r))
    if amp.ndim == 0:
        return JeffcottResponse(float(amp), float(lag))
    return JeffcottResponse(amp, lag)


@dataclass(frozen=True)
class SpeedAdvice:
    """Balancing-speed advice for one machine type.

    ``recommended_min_rpm``/``recommended_max_rpm`` bound the advised range
    (``None`` = no bound from this rule); ``speed_ok`` judges the proposed
    speed (``None`` when none was proposed). ``warnings`` say what is wrong
    with the proposal, ``cautions`` are always shown.
    """

    machine_type: str
    suspension_resonance_rpm: float
    recommended_min_rpm: float | None
    recommended_max_rpm: float | None
    proposed_speed_rpm: float | None
    speed_ok: bool | None
    warnings: list[str] = field(default_factory=list)
    cautions: list[str] = field(default_factory=list)


def balancing_speed_advice(
    machine_type: str,
    suspension_resonance_rpm: float,
    proposed_speed_rpm: float | None = None,
    max_permitted_speed_rpm: float | None = None,
    first_critical_rpm: float | None = None,
) -> SpeedAdvice:
    """Advise on the balancing speed for a soft- or hard-bearing machine.

    Soft-bearing (common practice, no source): run at ``>= 2×`` the rotor-on-
    suspension resonance, ``3×`` or more preferred — supercritical, the rotor
    turns about its centre of mass and the reading is proportional to the
    unbalance (Jeffcott: |X|/e → 1, lag → 180°). Hard-bearing (common
    practice): stay at ``<= 1/3`` of the resonance, where the bearing force is
    ``U·Ω²`` and the phase barely moves. The range is capped by
    ``max_permitted_speed_rpm`` and, for a rigid-rotor balance, by 70 % of the
    first bending critical speed.

    Parameters
    ----------
    machine_type : str
        ``"soft"`` or ``"hard"`` (bearing support of the balancing machine).
    suspension_resonance_rpm : float
        Resonance of the rotor on the machine's supports, > 0.
    proposed_speed_rpm : float, optional
        Speed the operator intends to use, > 0.
    max_permitted_speed_rpm : float, optional
        Lowest of the rotor's permitted speed and the machine's limit for this rotor.
    first_critical_rpm : float, optional
        First bending critical speed of the rotor.
    """
    if machine_type not in MACHINE_TYPES:
        raise BalancingInputError(
            "machine_type", f"unknown machine type {machine_type!r}; use soft or hard"
        )
    fr = positive("suspension_resonance_rpm", suspension_resonance_rpm)
    proposed = (
        None if proposed_speed_rpm is None else positive("proposed_speed_rpm", proposed_speed_rpm)
    )
    vmax = (
        None
        if max_permitted_speed_rpm is None
        else positive("max_permitted_speed_rpm", max_permitted_speed_rpm)
    )
    crit = (
        None if first_critical_rpm is None else positive("first_critical_rpm", first_critical_rpm)
    )

    warnings: list[str] = []
    cautions = [SPEED_CAUTION]
    caps = [vmax] if vmax is not None else []
    if crit is not None:
        caps.append(FLEXIBLE_SPEED_FRACTION * crit)
    cap = min(caps) if caps else None
    lo: float | None
    hi: float | None
    if machine_type == "soft":
        soft_min = SOFT_BEARING_MIN_RATIO * fr
        lo, hi = soft_min, cap
        if cap is not None and cap < soft_min:
            warnings.append(
                f"the speed limit ({cap:.0f} rpm) is below {short(SOFT_BEARING_MIN_RATIO)}× the "
                f"suspension resonance ({soft_min:.0f} rpm): a soft-bearing machine cannot "
                "measure this rotor reliably; use a hard-bearing machine or stiffer supports"
            )
    else:
        lo = None
        hi = HARD_BEARING_MAX_RATIO * fr if cap is None else min(HARD_BEARING_MAX_RATIO * fr, cap)

    ok = None
    if proposed is not None:
        ok = True
        if vmax is not None and proposed > vmax:
            ok = False
            warnings.append(
                f"proposed speed {proposed:.0f} rpm exceeds the permitted {vmax:.0f} rpm: "
                "over-speed risk, do not run"
            )
        if crit is not None and proposed >= crit:
            ok = False
            warnings.append(
                f"proposed speed {proposed:.0f} rpm is at or above the first bending critical "
                f"speed ({crit:.0f} rpm): the rotor bends and passes through its resonance "
                f"on the way up; do not balance it as a rigid rotor (keep below "
                f"{FLEXIBLE_SPEED_FRACTION * crit:.0f} rpm, or balance it as a flexible rotor "
                "under the machine maker's and licensed practice)"
            )
        elif crit is not None and proposed > FLEXIBLE_SPEED_FRACTION * crit:
            ok = False
            warnings.append(
                f"proposed speed {proposed:.0f} rpm is above 70 % of the first bending critical "
                f"speed ({FLEXIBLE_SPEED_FRACTION * crit:.0f} rpm): the rotor will not behave "
                "rigidly"
            )
        ratio = proposed / fr
        if machine_type == "soft" and ratio < SOFT_BEARING_MIN_RATIO:
            ok = False
            warnings.append(
                f"proposed speed is only {ratio:.2f}× the suspension resonance: a soft-bearing "
                f"machine needs at least {short(SOFT_BEARING_MIN_RATIO)}× "
                f"({short(SOFT_BEARING_GOOD_RATIO)}× or more preferred)"
            )
        elif machine_type == "soft" and ratio < SOFT_BEARING_GOOD_RATIO:
            warnings.append(
                f"proposed speed is {ratio:.2f}× the suspension resonance; "
                f"{short(SOFT_BEARING_GOOD_RATIO)}× or more gives steadier phase readings"
            )
        if machine_type == "hard" and ratio > HARD_BEARING_MAX_RATIO:
            ok = False
            warnings.append(
                f"proposed speed is {ratio:.2f}× the suspension resonance: a hard-bearing "
                f"machine should stay at or below 1/3 of it"
            )
        if math.isclose(ratio, 1.0, rel_tol=0.2):
            warnings.append(
                "proposed speed is close to the suspension resonance: readings and "
                "phase are unstable and vibration is high"
            )
    if vmax is None:
        cautions.append("no permitted speed given: confirm the rotor's permitted speed first")
    return SpeedAdvice(
        machine_type=machine_type,
        suspension_resonance_rpm=fr,
        recommended_min_rpm=lo,
        recommended_max_rpm=hi,
        proposed_speed_rpm=proposed,
        speed_ok=ok,
        warnings=warnings,
        cautions=cautions,
    )
