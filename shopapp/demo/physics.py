"""The simulated physics of the demo shop: rotors, machines, readings and what operators fit.

Each rotor carries a hidden true unbalance ``U`` (grams at the correction
radius, complex, per plane); its machine reads ``V = A_true · U + noise``
with a linear plant ``A_true`` per rotor type, machine and serial (a
hard-bearing machine's pedestal vibration from the rigid-rotor bearing
forces, a soft-bearing machine's supercritical displacement ``U/M`` plus
tilt, or a calibrated machine's g·mm with a small plane-separation error).
Readings are rounded like a machine display.

Every computation of the shop itself comes from :mod:`shopapp.balancing`
(:class:`Solver`): the coefficients from two trial runs
(:func:`~shopapp.balancing.influence.influence_coefficients`), the
correction ``W = −A⁻¹·V`` and the verdict. The demo
(``exact=True``) calls the validated per-call functions the jobs feature
uses (:func:`~shopapp.balancing.influence.correction_from_coefficients`,
:func:`~shopapp.balancing.tolerance.judge_residual`), so stored advice is the
core's answer; the bulk generator (``exact=False``) calls their vectorised
forms (:func:`~shopapp.balancing.influence.solve_two_plane_batch`,
:func:`~shopapp.balancing.tolerance.judge_residuals_batch`).

Nothing here is a real machine or rotor (see :mod:`shopapp.demo.scenario`).
"""

from __future__ import annotations

import cmath
import datetime as dt
import math
import random
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from shopapp.balancing import influence, positions, removal, tolerance
from shopapp.balancing.phasors import amplitude_angle, normalize_deg, phasor
from shopapp.demo import scenario as sc
from shopapp.jobs import calc as job_calc
from shopapp.models import Machine, RotorType
from shopapp.traceability import services as tr

Matrix = tuple[complex, complex, complex, complex]  # row-major 2×2: a11, a12, a21, a22
Pair = tuple[complex, complex]
Reading = tuple[tuple[float, float], tuple[float, float]]  # (amplitude, angle) per plane


def rect(amplitude: float, angle_deg: float) -> complex:
    # The same float operations as shopapp.balancing.phasors.phasor (which job_calc uses).
    return cmath.rect(amplitude, math.radians(angle_deg))


def round_step(mass_g: float, step_g: float) -> float:
    """``mass_g`` in whole steps of the stock (weights) or the scale (removal)."""
    return round(round(mass_g / step_g) * step_g, 6)


def nice_mass(mass_g: float, step_g: float) -> float:
    """A trial mass a shop would pick: two significant digits, a whole number of stock steps."""
    if mass_g <= 0:
        return step_g
    exp = math.floor(math.log10(mass_g)) - 1
    rounded = round(mass_g / 10**exp) * 10**exp
    return max(step_g, round(round(rounded / step_g) * step_g, 6))


# --------------------------------------------------------------------------- the shop's models


@dataclass
class MachineModel:
    spec: sc.MachineSpec
    id: int
    lapse: tuple[dt.date, dt.date] | None = None  # (due on, re-verified on)
    phase_deg: tuple[float, float] = (0.0, 0.0)
    tests: list[dt.date] = field(default_factory=list)  # proving-test days, sorted

    def overdue_on(self, day: dt.date) -> bool:
        """The register rule: overdue after the last passed test plus the interval."""
        last = [d for d in self.tests if d <= day]
        return not last or day > last[-1] + dt.timedelta(
            days=self.spec.verification_interval_days)

    def next_test_after(self, day: dt.date) -> dt.date | None:
        return next((d for d in self.tests if d > day), None)


@dataclass(frozen=True)
class Limits:
    """The job tolerance as the batch verdict takes it (limits in the planes compared)."""

    reference: str
    limits: np.ndarray  # shape (2,)
    transfer: np.ndarray | None  # shape (2, 2): correction → bearing planes


@dataclass
class TypeModel:
    spec: sc.RotorTypeSpec
    id: int
    customer_id: int
    machine: MachineModel
    row: RotorType
    tolerance: job_calc.JobTolerance
    limits: Limits
    radii: tuple[float, float]
    a_nominal: Matrix
    noise_abs: float
    decimals: int
    trial_g: tuple[float, float]
    tol_columns: dict[str, Any]
    fleet: list[RotorModel] = field(default_factory=list)
    fleet_target: int = 0
    serial_width: int = 4

    @property
    def calibrated(self) -> bool:
        return self.machine.spec.reading_unit == "g·mm"


@dataclass
class RotorModel:
    type: TypeModel
    id: int
    serial: str
    a_true: Matrix
    growth: float
    visits: int = 0
    free_from: dt.date = dt.date.min
    reserved: bool = False


# --------------------------------------------------------------------------- the core's answers


class Solver:
    """The balancing computations of the simulated shop, all from :mod:`shopapp.balancing`.

    ``exact=True`` calls the per-call functions the jobs feature calls (the
    demo: stored advice is the core's answer); ``exact=False`` their
    vectorised forms, one row at a time or a job's repeated runs at once
    (bulk mode). Both take the *stored* (rounded) readings.
    """

    def __init__(self, exact: bool) -> None:
        self.exact = exact
        # Bulk mode: the last solve, as a check run's residual and the next correction
        # answer the same reading (W = −A⁻¹·V, so A⁻¹·V = −W).
        self._last: tuple[Matrix, Pair, Pair] | None = None

    @staticmethod
    def coefficients(v0: Pair, trials: Sequence[tuple[int, float, float, Pair]]
                     ) -> tuple[Matrix, float]:
        """``A[:, j] = (V_j − V0) / T_j`` (trial masses removed before the next run)."""
        ic = influence.influence_coefficients(
            list(v0), [influence.TrialRun(p, m, a, tuple(v)) for p, m, a, v in trials]
        )
        a = ic.matrix()
        return (complex(a[0, 0]), complex(a[0, 1]), complex(a[1, 0]), complex(a[1, 1])), (
            ic.condition_number)

    def correction(self, a: Matrix, v: Pair) -> Pair:
        """``W = −A⁻¹ · V`` in grams at the correction radius."""
        if self.exact:
            sol = influence.correction_from_coefficients(
                np.array([[a[0], a[1]], [a[2], a[3]]]), list(v)
            )
            return sol.corrections[0].vector_g, sol.corrections[1].vector_g
        if self._last is not None and self._last[0] == a and self._last[1] == v:
            return self._last[2]
        w = self._solve(a, [v])[0]
        self._last = (a, v, w)
        return w

    @staticmethod
    def _solve(a: Matrix, vs: Sequence[Pair]) -> list[Pair]:
        """:func:`~shopapp.balancing.influence.solve_two_plane_batch` for readings ``vs``."""
        m = np.array([[[a[0], a[1]], [a[2], a[3]]]])
        if len(vs) > 1:
            m = np.broadcast_to(m, (len(vs), 2, 2))
        w = influence.solve_two_plane_batch(m, np.array(vs, dtype=complex)).corrections
        return [(complex(x[0]), complex(x[1])) for x in w]

    def unbalance_gmm(self, a: Matrix | None, v: Pair, radii: tuple[float, float]) -> Pair:
        """The unbalance a run shows: g·mm readings as they are, else ``A⁻¹·V·R``."""
        if a is None:
            return v
        if self.exact:
            u = np.linalg.lstsq(np.array([[a[0], a[1]], [a[2], a[3]]]), np.array(v), rcond=None)[0]
            return complex(u[0]) * radii[0], complex(u[1]) * radii[1]
        w = self.correction(a, v)  # A⁻¹·V = −W
        return -w[0] * radii[0], -w[1] * radii[1]

    def unbalances_gmm(self, a: Matrix | None, vs: Sequence[Pair], radii: tuple[float, float]
                       ) -> list[Pair]:
        """:meth:`unbalance_gmm` of several runs (bulk mode: one batch solve)."""
        if a is None or self.exact or len(vs) < 2:
            return [self.unbalance_gmm(a, v, radii) for v in vs]
        return [(-w[0] * radii[0], -w[1] * radii[1]) for w in self._solve(a, vs)]

    def verdicts(self, tm: TypeModel, residuals: Sequence[Pair]) -> list[bool]:
        """Each residual judged against the job tolerance (both planes within)."""
        if self.exact:
            core = tm.tolerance.core
            assert core is not None
            return [tolerance.judge_residual(u[0], u[1], core, tm.tolerance.geometry).passed
                    for u in residuals]
        lim = tm.limits
        batch = tolerance.judge_residuals_batch(np.array(residuals, dtype=complex).reshape(-1, 2),
                                                lim.limits, lim.transfer)
        return [bool(x) for x in batch.passed]

    def passed(self, tm: TypeModel, u: Pair) -> bool:
        return self.verdicts(tm, [u])[0]


# --------------------------------------------------------------------------- machine and rotor


def plant(rng: random.Random, spec: sc.RotorTypeSpec, mm: MachineModel,
          radii: tuple[float, float], level_gmm: float, transfer: np.ndarray) -> Matrix:
    """Nominal ``A`` (reading units per gram at each plane's radius) on the type's machine.

    ``transfer``: the rigid-rotor statics from the correction planes to the
    bearing planes (:func:`shopapp.balancing.planes.transfer_matrix`).
    """
    unit = mm.spec.reading_unit
    z1, z2 = spec.plane_1_mm, spec.plane_2_mm
    za, zb, zc = spec.bearing_a_mm, spec.bearing_b_mm, spec.centre_of_mass_mm
    if unit == "g·mm":
        # Calibrated machine: identity in g·mm plus a small plane-separation error.
        c = [complex(1.0 + rng.gauss(0, 0.015)) * rect(1.0, rng.gauss(0, 1.2)),
             rect(0.03, rng.uniform(0, 360)), rect(0.03, rng.uniform(0, 360)),
             complex(1.0 + rng.gauss(0, 0.015)) * rect(1.0, rng.gauss(0, 1.2))]
    elif unit == "mm/s":
        # Hard bearings: reading ∝ bearing force = Ω²·(equivalent unbalance in the bearing
        # planes, rigid-body statics); the gain is the range set for the rotor (~1.5 mm/s
        # for a tolerance-sized unbalance), the phases are the pick-ups'.
        t = transfer
        gain = 1.5 / level_gmm
        pa, pb = (rect(1.0, p) for p in mm.phase_deg)
        c = [gain * pa * t[0, 0], gain * pa * t[0, 1], gain * pb * t[1, 0],
             gain * pb * t[1, 1]]
    else:
        # Soft bearings, supercritical: the rotor turns about its centre of mass; the
        # bearing displacement is U/M (µm for g·mm and kg) plus the tilt from the moment
        # about the centre of mass, θ = Σ U_i·(z_i − z_c) / (M·k²), k = 0.3·span, and
        # lies opposite the heavy spot.
        m = spec.mass_kg
        k2 = (0.3 * abs(zb - za)) ** 2
        lag = rect(-1.0, rng.uniform(4, 10))
        pa, pb = (rect(1.0, p / 8.0) for p in mm.phase_deg)

        def p(zj: float, zi: float) -> float:
            return (1.0 + (zi - zc) * (zj - zc) / k2) / m

        c = [lag * pa * p(za, z1), lag * pa * p(za, z2), lag * pb * p(zb, z1),
             lag * pb * p(zb, z2)]
    return (complex(c[0]) * radii[0], complex(c[1]) * radii[1], complex(c[2]) * radii[0],
            complex(c[3]) * radii[1])


def measure(rng: random.Random, rotor: RotorModel, u: Pair, extra: Pair | None = None
            ) -> Reading:
    """The machine display for true unbalance ``u`` (grams at R): noisy, rounded.

    ``extra``: a reading the rotor does not cause (the true error of an arbor).
    """
    a = rotor.a_true
    tm = rotor.type
    out = []
    add = extra or (0j, 0j)
    for k, v in enumerate((a[0] * u[0] + a[1] * u[1], a[2] * u[0] + a[3] * u[1])):
        v = v + add[k]
        sigma = 0.006 * abs(v) + tm.noise_abs
        v = v + complex(rng.gauss(0, sigma), rng.gauss(0, sigma))
        amp, ang = amplitude_angle(v)
        amp = round(amp, tm.decimals)
        out.append((amp, float(round(ang) % 360) if amp > 0 else 0.0))
    return out[0], out[1]


def phasors(reading: Reading) -> Pair:
    return rect(*reading[0]), rect(*reading[1])


def fit(rng: random.Random, tm: TypeModel, person: sc.PersonSpec, w: Pair
        ) -> tuple[list[dict[str, Any]], Pair]:
    """What the operator fits for advice ``w`` (grams at R) and its true effect.

    The advice rounded to the weights in stock, split onto blades or holes
    (:func:`shopapp.balancing.positions.split_to_positions`), or drilled
    (:func:`shopapp.balancing.removal.drill_depth`), with the person's hidden
    fitting error.
    """
    spec = tm.spec
    sig_m = person.mass_error
    sig_a = person.angle_error_deg
    recs: list[dict[str, Any]] = []
    effect = [0j, 0j]
    for i in (0, 1):
        mass, add_angle = amplitude_angle(w[i])
        radius = tm.radii[i]
        if spec.method == "remove":
            loc = normalize_deg(add_angle + 180.0)
            m_rec = round_step(mass, spec.stock_g)
            if m_rec <= 0:
                continue
            ang_rec = float(round(loc) % 360)
            assert spec.density_g_cm3 is not None and spec.drill_diameter_mm is not None
            holes = 1
            hole = removal.drill_depth(m_rec, spec.drill_diameter_mm, spec.density_g_cm3)
            while hole.depth_to_tip_mm > 2.5 * spec.drill_diameter_mm and holes < 6:
                holes += 1
                hole = removal.drill_depth(m_rec / holes, spec.drill_diameter_mm,
                                           spec.density_g_cm3)
            true_m = m_rec * (1.0 + rng.gauss(0, sig_m + 0.02))
            effect[i] += -rect(true_m, ang_rec + rng.gauss(0, sig_a))
            recs.append({"plane": i + 1, "action": "remove", "mass_g": m_rec,
                         "angle_deg": ang_rec, "radius_mm": radius,
                         "advised_mass_g": mass, "advised_angle_deg": loc, "split": None,
                         "drill_diameter_mm": spec.drill_diameter_mm,
                         "drill_depth_mm": round(hole.depth_to_tip_mm, 2),
                         "drill_holes": holes})
        elif spec.positions:
            parts = positions.split_to_positions(mass, add_angle, spec.positions,
                                                 spec.first_position_deg).parts if mass > 0 \
                else ()
            split = []
            total = 0j
            for part in parts:
                m_p = round_step(part.mass_g, spec.stock_g)
                if m_p <= 0:
                    continue
                split.append({"position": part.position, "angle_deg": part.angle_deg,
                              "mass_g": m_p})
                total += rect(m_p, part.angle_deg)
                effect[i] += rect(m_p * (1.0 + rng.gauss(0, sig_m)),
                                  part.angle_deg + rng.gauss(0, 0.3 * sig_a))
            if not split:
                continue
            m_sum = round(sum(s["mass_g"] for s in split), 6)
            recs.append({"plane": i + 1, "action": "add", "mass_g": m_sum,
                         "angle_deg": amplitude_angle(total)[1], "radius_mm": radius,
                         "advised_mass_g": mass, "advised_angle_deg": add_angle,
                         "split": split, "drill_diameter_mm": None,
                         "drill_depth_mm": None, "drill_holes": None})
        else:
            m_rec = round_step(mass, spec.stock_g)
            if m_rec <= 0:
                continue
            ang_rec = float(round(add_angle) % 360)
            effect[i] += rect(m_rec * (1.0 + rng.gauss(0, sig_m)),
                              ang_rec + rng.gauss(0, sig_a))
            recs.append({"plane": i + 1, "action": "add", "mass_g": m_rec,
                         "angle_deg": ang_rec, "radius_mm": radius,
                         "advised_mass_g": mass, "advised_angle_deg": add_angle,
                         "split": None, "drill_diameter_mm": None, "drill_depth_mm": None,
                         "drill_holes": None})
    return recs, (effect[0], effect[1])


# --------------------------------------------------------------------------- the register


def proving_readings(rng: random.Random, machine: Machine, rotor: Any) -> dict[str, Any]:
    """One proving test's readings: the test mass at the 8 holes of each plane, and URR.

    Simulated (invented) as ISO 21940-21's idea has it, from memory: the
    proving rotor's residual per plane (0.2–0.6 × the plane's share of the
    claimed U_mar) plus a test unbalance of 15 × that share moved round the
    holes, read by the machine with 0.4 % gain and 1 % of the share noise;
    the reduction-ratio step removes a known unbalance with a few points of
    margin over the claimed URR. Evaluated by the service.
    """
    claim = machine.claimed_emar_gmm_per_kg * rotor.mass_kg
    share = claim / 2.0  # two planes (traceability's rule)
    mass = round(15.0 * share / rotor.radius_1_mm, 3)
    t_gmm = mass * rotor.radius_1_mm
    pos = tr.equally_spaced_deg(rotor.positions)
    amps: list[list[float]] = []
    angs: list[list[float]] = []
    for _plane in (1, 2):
        residual = rect(share * rng.uniform(0.2, 0.6), rng.uniform(0, 360))
        row_a, row_g = [], []
        for p in pos:
            z = (residual + rect(t_gmm, p)) * (1.0 + rng.gauss(0, 0.004))
            z += complex(rng.gauss(0, 0.01 * share), rng.gauss(0, 0.01 * share))
            a, g = amplitude_angle(z)
            row_a.append(round(a, 2))
            row_g.append(round(g, 1) % 360.0)
        amps.append(row_a)
        angs.append(row_g)
    before = [round(20.0 * share * rng.uniform(0.8, 1.2), 1) for _ in range(2)]
    urr = [min(99.5, (machine.claimed_urr_pct or 90.0) + rng.uniform(1.0, 6.0))
           for _ in range(2)]
    after = [round(b * (1.0 - r / 100.0), 2) for b, r in zip(before, urr, strict=True)]
    return {"test_mass_g": mass, "test_radius_mm": rotor.radius_1_mm, "indicated_gmm": amps,
            "indicated_angles_deg": angs, "urr_before_gmm": before, "urr_after_gmm": after}


def arbor_true_error(start: dt.date, end: dt.date, day: dt.date) -> Pair:
    """The shop arbor's true error on ``day`` (g·mm per plane, arbor frame): a slow drift."""
    span = max(1, (end - start).days + 20)
    frac = min(1.0, max(0.0, (day - start).days + 20) / span)
    out = [rect(a * (1.0 + (sc.ARBOR_DRIFT - 1.0) * frac), g + sc.ARBOR_TURN_DEG * frac)
           for a, g in sc.ARBOR_ERROR_GMM]
    return out[0], out[1]


def index_runs(rng: random.Random, true: Pair
               ) -> tuple[list[tuple[float, float]], list[tuple[float, float]], Pair]:
    """Index runs with a reference impeller on the arbor and the arbor error they give.

    The impeller runs, is turned 180° on the arbor (−U_r) and runs again
    (calibrated g·mm readings, rounded like the display); the two are
    separated with :func:`shopapp.traceability.services.separate_index_runs`
    as :func:`~shopapp.traceability.services.record_arbor_error` will.
    Returns both runs and the measured error as stored and read back.
    """
    u_r = [rect(rng.uniform(40.0, 120.0), rng.uniform(0, 360)) for _ in range(2)]
    runs = []
    for sign in (1.0, -1.0):
        run = []
        for i in (0, 1):
            z = sign * u_r[i] + true[i] + complex(rng.gauss(0, 0.3), rng.gauss(0, 0.3))
            a, g = amplitude_angle(z)
            run.append((round(a, 1), float(round(g) % 360)))
        runs.append(run)
    sep = tr.separate_index_runs(runs[0], runs[1], planes=2)
    # As stored (amplitude and angle) and read back by arbor_error_vector.
    meas = tuple(phasor(*amplitude_angle(z)) for z in sep.arbor)
    return runs[0], runs[1], (meas[0], meas[1])
