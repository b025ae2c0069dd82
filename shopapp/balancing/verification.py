"""Residual-unbalance verification and the balancing-machine proving test.

Residual-unbalance test: a known test unbalance ``T`` (g·mm) is fixed in turn
at N positions ``θ_k`` around the correction plane and a reading taken at each.
For a linear machine the reading is ``S · (U_r + T·e^{iθ_k})`` with an unknown
complex sensitivity ``S`` and the residual unbalance ``U_r``: the readings lie
on a circle of radius ``|S|·T`` around ``S·U_r``. Two evaluations:

* **with phase** — the linear least-squares fit ``z_k = c + q·e^{iθ_k}`` (the
  positions are known, so the circle is fitted with its angular scale, not only
  its centre) gives ``U_r = T · c / q``: magnitude and angle in the rotor's
  frame, whatever the sensor's phase offset;
* **amplitudes only** — ``a_k² = |S|²·(R² + T² + 2RT·cos(θ_k - φ))`` is linear
  in ``(p0, p1, p2) = |S|²·(R² + T², 2RT·cos φ, 2RT·sin φ)``; with
  ``ρ = √(p1² + p2²)/p0 = 2x/(1 + x²)``, ``x = R/T = ρ / (1 + √(1 - ρ²))`` and
  ``φ = atan2(p2, p1)`` (where the amplitude peaks). Amplitudes alone cannot
  tell ``x`` from ``1/x``; the test assumes the test unbalance is the larger.

Rules of this module (judgement / common practice, no source):

* at least 4 positions are required — with 3 the 3-parameter amplitude fit is
  exact and leaves no check that the points lie on a circle; 6 or more
  (6, 8, 12 as usual in shops) are recommended and fewer give a warning;
* the fit quality is the RMS deviation of the readings from the fitted circle,
  divided by the circle radius (degrees-of-freedom corrected); above
  :data:`FIT_REFUSE` (0.20) the points do not describe a circle and the test is
  refused, above :data:`FIT_WARN` (0.10) it is accepted with a warning;
* with amplitudes only the test is refused when ``R/T`` exceeds
  :data:`AMPLITUDE_RATIO_REFUSE` (0.8): near 1 the amplitudes cannot separate
  residual from test unbalance; both methods warn above 0.5 — the test
  unbalance should clearly exceed the residual;
* the angle is reported only when the residual is larger than the scatter of
  the fit expressed in g·mm (``fit_rms_relative · T``).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from shopapp.balancing.checks import finite_array, non_negative, positive
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.numtext import short
from shopapp.balancing.phasors import normalize_deg

MIN_POSITIONS = 4
RECOMMENDED_POSITIONS = 6
FIT_WARN = 0.10
FIT_REFUSE = 0.20
RATIO_WARN = 0.5
AMPLITUDE_RATIO_REFUSE = 0.8
# A residual below a billionth of the test unbalance is the arithmetic's rounding of
# readings that lie exactly on a circle round the origin (typed or simulated), far below
# any reading's resolution: it is taken as zero, not reported as a measured 1e-14 g·mm.
ROUNDING_RATIO = 1e-9
# Positions closer together than this (design-matrix condition) carry no circle.
_DESIGN_COND_REFUSE = 1e6


@dataclass(frozen=True)
class ResidualVerification:
    """Result of :func:`verify_residual`.

    ``residual_ratio`` is ``R/T``; ``circle_radius`` (reading units) is the
    reading change a test unbalance of ``T`` makes, and
    ``sensitivity_per_gmm = circle_radius / T``. ``angle_deg`` is None when it
    cannot be known (residual below the scatter of the readings).
    """

    method: str
    residual_gmm: float
    angle_deg: float | None
    test_unbalance_gmm: float
    residual_ratio: float
    fit_rms_relative: float
    circle_radius: float
    sensitivity_per_gmm: float
    points: int
    permissible_gmm: float | None
    within_tolerance: bool | None
    warnings: tuple[str, ...]


INDICATION_TOLERANCE = 0.10  # indicated / known test unbalance may differ from 1 by this


@dataclass(frozen=True)
class MinimumResidualTest:
    """Result of :func:`minimum_achievable_residual`.

    ``indication_ratio`` is the test unbalance the machine indicated (fitted
    circle radius, g·mm) over the one fitted (1.0 for a machine that reads true);
    ``passed`` needs it within ``INDICATION_TOLERANCE`` of 1 as well as U_mar ≤ claim.
    ``specific_gmm_per_kg`` is ``U_mar / rotor mass`` (g·mm/kg = µm) when the
    proving-rotor mass was given.
    """

    umar_gmm: float
    specific_gmm_per_kg: float | None
    claimed_umar_gmm: float
    passed: bool
    indication_ratio: float
    fit: ResidualVerification
    warnings: tuple[str, ...]

    @property
    def reads_true(self) -> bool:
        """The machine indicated the known test unbalance within ``INDICATION_TOLERANCE``."""
        return abs(self.indication_ratio - 1.0) <= INDICATION_TOLERANCE

    @property
    def within_claim(self) -> bool:
        """U_mar is at most the claimed value (whether or not the machine reads true)."""
        return self.umar_gmm <= self.claimed_umar_gmm

    @property
    def verdict_text(self) -> str:
        """The plane's verdict in words: why it failed, when it did."""
        if self.passed:
            return "within claim"
        if not self.reads_true:
            return "test unbalance misread" if self.within_claim else (
                "above claim; test unbalance misread")
        return "above claim"


@dataclass(frozen=True)
class ReductionRatio:
    """Unbalance reduction ratio per plane (percent) and the worst plane."""

    urr_percent: tuple[float, ...]
    min_urr_percent: float
    claimed_urr_percent: float | None
    passed: bool | None
    warnings: tuple[str, ...]


def _readings(
    positions_deg: Sequence[float],
    amplitudes: Sequence[float],
    angles_deg: Sequence[float] | None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    pos = finite_array("positions_deg", positions_deg)
    amp = finite_array("readings.amplitude", amplitudes)
    if pos.dtype.kind == "c" or amp.dtype.kind == "c":
        raise BalancingInputError("readings", "positions and amplitudes must be real numbers")
    if pos.ndim != 1 or amp.shape != pos.shape:
        raise BalancingInputError("readings", "need one amplitude per test-mass position")
    if pos.size < MIN_POSITIONS:
        raise BalancingInputError(
            "readings",
            f"at least {MIN_POSITIONS} test-mass positions are needed to check that the readings "
            f"lie on a circle ({RECOMMENDED_POSITIONS} or more recommended); given: {pos.size}",
        )
    if np.any(amp < 0.0):
        raise BalancingInputError("readings.amplitude", "amplitudes must not be negative")
    ang = None
    if angles_deg is not None:
        ang = finite_array("readings.angle_deg", angles_deg)
        if ang.dtype.kind == "c" or ang.shape != pos.shape:
            raise BalancingInputError("readings.angle_deg", "need one real angle per position")
    return np.radians(pos), amp.astype(float), None if ang is None else np.radians(ang)


def _check_design(x: np.ndarray) -> None:
    s = np.linalg.svd(x, compute_uv=False)
    if s[-1] <= s[0] / _DESIGN_COND_REFUSE:
        raise BalancingInputError(
            "readings", "the test-mass positions must be spread around the rotor"
        )


def _not_a_circle(fit: float) -> BalancingInputError:
    scatter = "" if math.isinf(fit) else f"scatter {100 * fit:.0f} % of the circle radius, "
    return BalancingInputError(
        "readings",
        f"the readings do not describe a circle ({scatter}limit {100 * FIT_REFUSE:.0f} %): "
        "check the positions, that positions and phase are counted in the same sense, "
        "and the machine, then repeat the test",
    )


def verify_residual(
    test_unbalance_gmm: float,
    positions_deg: Sequence[float],
    amplitudes: Sequence[float],
    angles_deg: Sequence[float] | None = None,
    *,
    permissible_gmm: float | None = None,
) -> ResidualVerification:
    """Residual unbalance from a test unbalance moved round N positions.

    See the module docstring for the two least-squares evaluations and the
    acceptance rules.

    Parameters
    ----------
    test_unbalance_gmm : float
        Test unbalance ``T = m·r``, g·mm, > 0.
    positions_deg : sequence of float
        Angle of the test mass at each reading, degrees in the direction of rotation.
    amplitudes : sequence of float
        Reading amplitude at each position (any unit, >= 0).
    angles_deg : sequence of float, optional
        Reading phase at each position, degrees, same sense as the positions;
        given -> the phase evaluation, else the amplitude-only one.
    permissible_gmm : float, optional
        Permissible residual unbalance for the plane; sets ``within_tolerance``.

    Returns
    -------
    ResidualVerification

    Raises
    ------
    BalancingInputError
        Fewer than 4 positions or positions not spread (``readings``), points
        not on a circle (``readings``), test unbalance too small for an
        amplitude-only test or without effect (``test_unbalance_gmm``).
    """
    t_gmm = positive("test_unbalance_gmm", test_unbalance_gmm)
    theta, amp, phase = _readings(positions_deg, amplitudes, angles_deg)
    n = theta.size
    if float(np.max(amp)) == 0.0:
        raise BalancingInputError(
            "test_unbalance_gmm", "every reading is zero: the test unbalance made no change"
        )
    warnings: list[str] = []
    if n < RECOMMENDED_POSITIONS:
        warnings.append(
            f"Only {n} positions; {RECOMMENDED_POSITIONS} or more are recommended "
            "(common practice)."
        )
    if phase is not None:
        method = "phase"
        z = amp * np.exp(1j * phase)
        design = np.column_stack([np.ones(n, dtype=complex), np.exp(1j * theta)])
        _check_design(design)
        (c, q), *_ = np.linalg.lstsq(design, z, rcond=None)
        radius = float(abs(q))
        spread = float(np.max(np.abs(z - z.mean())))
        if spread <= 1e-12 * float(np.max(amp)):
            raise BalancingInputError(
                "test_unbalance_gmm",
                "the test unbalance made no measurable change in the readings",
            )
        err = z - design @ np.array([c, q])
        rms = math.sqrt(float(np.sum(np.abs(err) ** 2)) / (n - 2))
        # Readings that move but not with the test mass (e.g. phase counted against
        # rotation) leave radius ~ 0: that is "not a circle", not "no effect".
        fit = rms / radius if radius > 1e-12 * spread else math.inf
        if fit > FIT_REFUSE:
            raise _not_a_circle(fit)
        u_r = t_gmm * complex(c) / complex(q)
        ratio = abs(u_r) / t_gmm
        residual_angle = math.degrees(math.atan2(u_r.imag, u_r.real))
    else:
        method = "amplitude"
        design = np.column_stack([np.ones(n), np.cos(theta), np.sin(theta)])
        _check_design(design)
        p0, p1, p2 = (float(v) for v in np.linalg.lstsq(design, amp**2, rcond=None)[0])
        if p0 <= 0.0:
            raise _not_a_circle(math.inf)
        rho = math.hypot(p1, p2) / p0
        if rho >= 1.0:
            raise BalancingInputError(
                "test_unbalance_gmm",
                "the residual is about as large as the test unbalance (or larger); with "
                "amplitudes only the two cannot be told apart — use a larger test unbalance",
            )
        ratio = rho / (1.0 + math.sqrt(1.0 - rho * rho))
        radius = math.sqrt(p0 / (1.0 + ratio * ratio))
        if radius <= 1e-12 * float(np.max(amp)):
            raise BalancingInputError(
                "test_unbalance_gmm",
                "the test unbalance made no measurable change in the readings",
            )
        fitted = np.sqrt(np.maximum(design @ np.array([p0, p1, p2]), 0.0))
        fit = math.sqrt(float(np.sum((amp - fitted) ** 2)) / (n - 3)) / radius
        if fit > FIT_REFUSE:
            raise _not_a_circle(fit)
        if ratio > AMPLITUDE_RATIO_REFUSE:
            raise BalancingInputError(
                "test_unbalance_gmm",
                f"residual is {100 * ratio:.0f} % of the test unbalance (limit "
                f"{100 * AMPLITUDE_RATIO_REFUSE:.0f} % for an amplitude-only test): amplitudes "
                "cannot separate them — use a larger test unbalance",
            )
        residual_angle = math.degrees(math.atan2(p2, p1))
    if ratio < ROUNDING_RATIO:
        ratio = 0.0
    residual = ratio * t_gmm
    if fit > FIT_WARN:
        warnings.append(
            f"Readings scatter {100 * fit:.0f} % of the circle radius about the fitted circle "
            f"(warning above {100 * FIT_WARN:.0f} %)."
        )
    if ratio > RATIO_WARN:
        warnings.append(
            f"The residual is {100 * ratio:.0f} % of the test unbalance; a test unbalance "
            "several times the residual gives a clearer result."
        )
    angle: float | None = normalize_deg(residual_angle)
    if residual <= fit * t_gmm:
        angle = None
        warnings.append(
            "The residual is smaller than the scatter of the readings; its angle is not known."
        )
    within: bool | None = None
    perm: float | None = None
    if permissible_gmm is not None:
        perm = positive("permissible_gmm", permissible_gmm)
        within = residual <= perm
    return ResidualVerification(
        method=method,
        residual_gmm=residual,
        angle_deg=angle,
        test_unbalance_gmm=t_gmm,
        residual_ratio=ratio,
        fit_rms_relative=fit,
        circle_radius=radius,
        sensitivity_per_gmm=radius / t_gmm,
        points=n,
        permissible_gmm=perm,
        within_tolerance=within,
        warnings=tuple(warnings),
    )


def minimum_achievable_residual(
    test_unbalance_gmm: float,
    positions_deg: Sequence[float],
    indicated_gmm: Sequence[float],
    indicated_angles_deg: Sequence[float] | None = None,
    *,
    claimed_umar_gmm: float,
    rotor_mass_kg: float | None = None,
) -> MinimumResidualTest:
    """Minimum achievable residual unbalance ``U_mar`` of a balancing machine.

    Idea of ISO 21940-21 (formerly ISO 2953), from memory: the proving rotor is
    balanced as well as the machine allows, then a known test unbalance is
    moved round equally spaced positions and the machine's indication read at
    each; the residual found is the machine's achievable ``U_mar`` and must not
    exceed the maker's claim. The evaluation here is :func:`verify_residual` on
    the machine's indicated unbalance (g·mm); the standard's own evaluation
    sheet and its choice of test-mass size are not reproduced.

    Parameters
    ----------
    test_unbalance_gmm : float
        Known test unbalance, g·mm, > 0 (commonly several times the claimed U_mar).
    positions_deg : sequence of float
        Test-mass positions, degrees.
    indicated_gmm : sequence of float
        Unbalance amplitude indicated by the machine at each position, g·mm.
    indicated_angles_deg : sequence of float, optional
        Indicated angle at each position, degrees.
    claimed_umar_gmm : float
        The machine's claimed minimum achievable residual unbalance, g·mm, > 0.
    rotor_mass_kg : float, optional
        Proving-rotor mass, kg, for the specific value U_mar / m.
    """
    claimed = positive("claimed_umar_gmm", claimed_umar_gmm)
    mass = None if rotor_mass_kg is None else positive("rotor_mass_kg", rotor_mass_kg)
    fit = verify_residual(test_unbalance_gmm, positions_deg, indicated_gmm, indicated_angles_deg)
    indication = fit.circle_radius / fit.test_unbalance_gmm
    warnings = list(fit.warnings)
    if abs(indication - 1.0) > INDICATION_TOLERANCE:
        warnings.append(
            f"The machine indicated the test unbalance as {100 * indication:.0f} % of its "
            "known value; check the machine's calibration (plane separation, radius, speed)."
        )
    umar = fit.residual_gmm
    # A machine that does not read a known unbalance true cannot prove its U_mar either:
    # the test fails, whatever the residual (the ±10 % band is ours, common practice).
    reads_true = abs(indication - 1.0) <= INDICATION_TOLERANCE  # as the property below
    if not reads_true:
        warnings.append("The test fails: the machine must indicate the known test unbalance "
                        f"within ±{100 * INDICATION_TOLERANCE:.0f} % before its U_mar counts.")
    return MinimumResidualTest(
        umar_gmm=umar,
        specific_gmm_per_kg=None if mass is None else umar / mass,
        claimed_umar_gmm=claimed,
        passed=umar <= claimed and reads_true,
        indication_ratio=indication,
        fit=fit,
        warnings=tuple(warnings),
    )


def unbalance_reduction_ratio(
    before_gmm: Sequence[complex] | Sequence[float],
    after_gmm: Sequence[complex] | Sequence[float],
    *,
    claimed_urr_percent: float | None = None,
) -> ReductionRatio:
    """Unbalance reduction ratio per plane, ``URR = (1 - |U_after| / |U_before|) · 100 %``.

    Definition as in ISO 21940-21 / ISO 2953 (from memory): known unbalances
    are added to the balanced proving rotor (``before``), one correction step
    is made from the machine's indication, and the unbalance left (``after``)
    is measured. Complex values are taken by magnitude. A plane where the
    unbalance grew gives a negative URR.

    Parameters
    ----------
    before_gmm : sequence
        Unbalance per plane before the correction step, g·mm (non-zero).
    after_gmm : sequence
        Unbalance per plane after it, g·mm.
    claimed_urr_percent : float, optional
        The machine's claimed URR; sets ``passed`` (every plane at least the claim).
    """
    before = finite_array("before_gmm", before_gmm)
    after = finite_array("after_gmm", after_gmm)
    if before.ndim != 1 or before.size == 0:
        raise BalancingInputError("before_gmm", "must list the unbalance of each plane")
    if after.shape != before.shape:
        raise BalancingInputError("after_gmm", f"needs one value per plane ({before.size})")
    b = np.abs(before).astype(float)
    a = np.abs(after).astype(float)
    if np.any(b <= 0.0):
        raise BalancingInputError("before_gmm", "every plane needs a non-zero unbalance")
    with np.errstate(over="ignore"):
        urr = (1.0 - a / b) * 100.0
    if not np.all(np.isfinite(urr)):
        # A "before" so small beside "after" that the ratio overflows (e.g. 1e-310 g·mm).
        raise BalancingInputError("before_gmm", "is too small beside the unbalance left "
                                  "after the step: the ratio is not a finite number")
    claim = None
    passed = None
    if claimed_urr_percent is not None:
        claim = non_negative("claimed_urr_percent", claimed_urr_percent)
        if claim > 100.0:
            raise BalancingInputError("claimed_urr_percent",
                                      f"must be at most 100, got {short(claim)}")
        passed = bool(np.all(urr >= claim))
    warnings = []
    if np.any(urr < 0.0):
        warnings.append("The unbalance grew in at least one plane: the correction made it worse.")
    return ReductionRatio(
        urr_percent=tuple(float(u) for u in urr),
        min_urr_percent=float(np.min(urr)),
        claimed_urr_percent=claim,
        passed=passed,
        warnings=tuple(warnings),
    )
