"""Run-up records: record one (checked reading by reading) and analyse it.

Rules of this module (ours, no source):

* a record needs at least :data:`MIN_POINTS` readings (the fit's minimum,
  :data:`shopapp.balancing.runup.MIN_POINTS`) and at most :data:`MAX_POINTS`;
* every speed is finite and > 0, and not above the machine's maximum speed when
  the record names a machine (a job's run-up is made on the job's machine);
  without a machine not above :data:`MAX_SPEED_RPM`;
* every amplitude is finite and >= 0; every angle finite. Angles are typed in
  the shop's display convention; an angle outside [0, 360) is wrapped onto it
  and the wrap is reported back as a note naming the line (instruments that
  count the phase on past 360° are common), never silently;
* the speeds rise strictly from reading to reading (a run-up) or fall strictly
  (a coast-down); the record says which;
* an operating speed or an operating range (lowest < highest), not both.

The analysis is :func:`shopapp.balancing.runup.analyse_runup` (Jeffcott model,
separation margin rules and their sources are in that module's docstring); the
verdict in plain words is ours.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
from sqlalchemy.orm import Session

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.phasors import normalize_deg
from shopapp.core import audit
from shopapp.core.checks import Errors
from shopapp.core.checks import date as check_date
from shopapp.core.checks import number as check_number
from shopapp.core.checks import text as check_text
from shopapp.core.clock import shop_today
from shopapp.core.display import ShopDisplay, number, quantity
from shopapp.core.permissions import require
from shopapp.core.settings import get_settings
from shopapp.models import (
    MEASURED_QUANTITIES,
    RUNUP_UNITS,
    Job,
    Machine,
    RunUpPoint,
    RunUpRecord,
    User,
)

if TYPE_CHECKING:
    from shopapp.balancing import runup

# The fit's minimum, shopapp.balancing.runup.MIN_POINTS (a test checks they agree); that
# module pulls in scipy's solvers, so it is imported when a run-up is analysed, not here.
MIN_POINTS = 5
MAX_POINTS = 500
MAX_SPEED_RPM = 100_000.0
SENSOR_MAX = 64
SWEEP_WORDS = {"run_up": "run-up (speeds rising)", "coast_down": "coast-down (speeds falling)"}


@dataclass(frozen=True)
class PointIn:
    """One reading as typed: speed (rpm), amplitude (the record's unit), angle in the
    shop's display convention; ``line`` is where it was typed (messages name it)."""

    speed_rpm: Any
    amplitude: Any
    angle_deg: Any
    line: int | None = None

    def where(self, index: int) -> str:
        return f"line {self.line}" if self.line is not None else f"reading {index + 1}"


@dataclass(frozen=True)
class Recorded:
    """A stored run-up and the notes to show once (e.g. angles wrapped onto 0…360°)."""

    record: RunUpRecord
    notes: tuple[str, ...]


def _rpm(value: float) -> str:
    return quantity(value, "rpm")


def _wrapped(value: float, where: str, notes: list[str]) -> float:
    out = normalize_deg(value)
    if not math.isclose(out, value, abs_tol=1e-9):
        notes.append(f"{where}: angle {quantity(value, '°')} taken as {quantity(out, '°')}")
    return out


def _check_points(
    e: Errors, points: Sequence[PointIn], machine: Machine | None, disp: ShopDisplay,
    notes: list[str],
) -> tuple[list[tuple[float, float, float]], str | None]:
    """Checked readings ``(speed, amplitude, internal angle)`` and the sweep, or errors in ``e``."""
    if len(points) < MIN_POINTS:
        e.add("points", f"at least {MIN_POINTS} readings are needed to fit a resonance, "
                        f"got {len(points)}")
        return [], None
    if len(points) > MAX_POINTS:
        e.add("points", f"at most {MAX_POINTS} readings, got {len(points)}")
        return [], None
    limit = machine.max_speed_rpm if machine is not None else MAX_SPEED_RPM
    whose = f"the maximum speed of {machine.name}" if machine is not None else "the limit"
    out: list[tuple[float, float, float]] = []
    for k, p in enumerate(points):
        where = p.where(k)
        local = Errors()
        speed = check_number(local, "speed", p.speed_rpm, above=0.0, unit="rpm")
        amp = check_number(local, "amplitude", p.amplitude, minimum=0.0)
        angle = check_number(local, "angle", p.angle_deg)
        if speed is not None and speed > limit:
            local.add("speed", f"{_rpm(speed)} is above {whose} ({_rpm(limit)})")
        if local:
            name = next(iter(local))
            e.add(f"points.{k}", f"{where}: {name} {local[name]}")
            continue
        assert speed is not None and amp is not None and angle is not None
        internal = disp.internal(_wrapped(angle, where, notes))
        assert internal is not None
        out.append((speed, amp, internal))
    if e:
        return [], None
    steps = np.diff([s for s, _, _ in out])
    rising = bool(steps[0] > 0)
    for k, step in enumerate(steps, start=1):
        if step == 0 or (step > 0) != rising:
            here, before = points[k].where(k), points[k - 1].where(k - 1)
            if step == 0:
                why = f"repeats the speed of {before} ({_rpm(out[k][0])}); give each speed once"
            else:
                why = (f"({_rpm(out[k][0])}) does not follow {before} ({_rpm(out[k - 1][0])}): "
                       "the speeds must rise from line to line (a run-up) or fall from line to "
                       "line (a coast-down)")
            e.add("points", f"{here} {why}")
            return [], None
    return out, "run_up" if rising else "coast_down"


def record_run_up(
    session: Session,
    *,
    by: User,
    job: Job | None = None,
    machine: Machine | None = None,
    recorded_on: dt.date | None,
    sensor: str,
    measured: str,
    unit: str,
    points: Sequence[PointIn],
    slow_roll_amplitude: Any = None,
    slow_roll_angle_deg: Any = None,
    operating_speed_rpm: Any = None,
    operating_lo_rpm: Any = None,
    operating_hi_rpm: Any = None,
    notes: str = "",
    today: dt.date | None = None,
) -> Recorded:
    """Store a run-up (or coast-down) of one sensor for a job and/or a machine.

    Angles (readings and slow roll) are in the shop's display convention and
    are stored internally. A job's run-up is checked against the job's machine
    unless ``machine`` names another. Raises :class:`ValidationFailed` with a
    message per field (``points.<k>`` per reading, naming the typed line).
    """
    require(by, "work_jobs")
    disp = ShopDisplay(get_settings(session))
    e = Errors()
    if job is None and machine is None:
        e.add("job", "a run-up belongs to a job or a machine; name one")
    if machine is None and job is not None:
        machine = job.machine
    today = today or shop_today()
    day = check_date(e, "recorded_on", recorded_on, not_after=today)
    label = check_text(e, "sensor", sensor, max_len=SENSOR_MAX, required=True)
    if measured not in MEASURED_QUANTITIES:
        e.add("measured", f"must be one of {', '.join(MEASURED_QUANTITIES)}")
    elif unit not in RUNUP_UNITS[measured]:
        e.add("unit", f"{unit!r} is not a unit of {measured}; choose "
                      f"{' or '.join(RUNUP_UNITS[measured])}")
    wrap_notes: list[str] = []
    readings, sweep = _check_points(e, points, machine, disp, wrap_notes)

    sr_amp = check_number(e, "slow_roll_amplitude", slow_roll_amplitude, required=False,
                          minimum=0.0)
    sr_ang = check_number(e, "slow_roll_angle_deg", slow_roll_angle_deg, required=False)
    if (sr_amp is None) != (sr_ang is None) and not (
        "slow_roll_amplitude" in e or "slow_roll_angle_deg" in e
    ):
        missing = "slow_roll_angle_deg" if sr_ang is None else "slow_roll_amplitude"
        e.add(missing, "give the slow-roll amplitude and its angle together (or neither)")
    sr_internal = None
    if sr_amp is not None and sr_ang is not None:
        sr_internal = disp.internal(_wrapped(sr_ang, "slow roll", wrap_notes))

    op = check_number(e, "operating_speed_rpm", operating_speed_rpm, required=False, above=0.0,
                      maximum=MAX_SPEED_RPM, unit="rpm")
    lo = check_number(e, "operating_lo_rpm", operating_lo_rpm, required=False, above=0.0,
                      maximum=MAX_SPEED_RPM, unit="rpm")
    hi = check_number(e, "operating_hi_rpm", operating_hi_rpm, required=False, above=0.0,
                      maximum=MAX_SPEED_RPM, unit="rpm")
    if (lo is None) != (hi is None) and "operating_lo_rpm" not in e and "operating_hi_rpm" not in e:
        e.add("operating_hi_rpm" if hi is None else "operating_lo_rpm",
              "give both ends of the operating range (or neither)")
    if lo is not None and hi is not None and hi <= lo:
        e.add("operating_hi_rpm", f"the highest speed ({_rpm(hi)}) must be above the lowest "
                                  f"({_rpm(lo)})")
    if op is not None and (lo is not None or hi is not None):
        e.add("operating_speed_rpm", "give an operating speed or an operating range, not both")
    remark = check_text(e, "notes", notes)
    e.raise_if_any()
    assert day is not None and sweep is not None

    rec = RunUpRecord(
        job_id=job.id if job is not None else None,
        machine_id=machine.id if machine is not None else None,
        recorded_on=day, sensor=label, measured=measured, unit=unit, sweep=sweep,
        slow_roll_amplitude=sr_amp, slow_roll_angle_deg=sr_internal,
        operating_speed_rpm=op, operating_lo_rpm=lo, operating_hi_rpm=hi,
        notes=remark, by_id=by.id,
    )
    rec.points = [RunUpPoint(seq=k + 1, speed_rpm=s, amplitude=a, angle_deg=ang)
                  for k, (s, a, ang) in enumerate(readings)]
    session.add(rec)
    session.flush()
    speeds = [s for s, _, _ in readings]
    audit.record(
        session, by=by, entity="run_up", entity_id=rec.id, action="record",
        after={**audit.snapshot(rec), "points": len(readings),
               "speed_range_rpm": [min(speeds), max(speeds)], "wrapped": wrap_notes},
        job_id=rec.job_id,
    )
    return Recorded(record=rec, notes=tuple(wrap_notes))


# --------------------------------------------------------------------------- analysis


@dataclass(frozen=True)
class PeakRow:
    """One resonance of a run-up, ready for a table (None = not available)."""

    critical_speed_rpm: float
    damping_ratio: float
    amplification_factor: float
    amplification_factor_half_power: float | None
    separation_margin_pct: float | None
    required_margin_pct: float | None
    margin_ok: bool | None
    fit_residual_pct: float
    bracketed: bool


@dataclass(frozen=True)
class RunUpAnalysis:
    """What the pages show of a run-up.

    ``verdict`` is one sentence in plain words, ``verdict_state`` one of
    ``clear``, ``too_close``, ``no_margin`` (no operating speed), ``unreliable``
    or ``failed`` (no result; ``verdict`` says why). ``result``/``curves`` are
    the numerics' objects (None when the analysis failed); angles in ``curves``
    are internal.
    """

    record_id: int
    verdict: str
    verdict_state: str
    peaks: tuple[PeakRow, ...] = ()
    governing: int = 0
    warnings: tuple[str, ...] = ()
    cautions: tuple[str, ...] = ()
    result: runup.RunupResult | None = None
    curves: runup.RunupCurves | None = field(default=None, repr=False)

    @property
    def main(self) -> PeakRow | None:
        return self.peaks[self.governing] if self.peaks else None


def operating_range(rec: RunUpRecord) -> tuple[float, float] | None:
    if rec.operating_lo_rpm is None or rec.operating_hi_rpm is None:
        return None
    return (rec.operating_lo_rpm, rec.operating_hi_rpm)


def _verdict(res: runup.RunupResult) -> tuple[str, str]:
    from shopapp.balancing import runup

    g = res.peaks[res.governing]
    nc = _rpm(g.critical_speed_rpm)
    if g.fit_residual_pct > runup.FIT_POOR_PCT:
        return (f"Unreliable: one resonance does not describe these readings (misfit "
                f"{quantity(g.fit_residual_pct, '%')}); check the readings before trusting "
                f"the critical speed {nc}.", "unreliable")
    if not g.bracketed:
        return (f"Unreliable: the readings do not reach past both sides of the resonance near "
                f"{nc}; record speeds on both sides of the peak.", "unreliable")
    if res.margin_ok is None:
        return (f"Critical speed {nc}. No operating speed given, so no separation-margin "
                "verdict.", "no_margin")
    failing = [p for p in res.peaks if p.margin_ok is False]
    if failing:
        p = failing[0]
        return (f"Too close: the critical speed {_rpm(p.critical_speed_rpm)} is only "
                f"{quantity(p.separation_margin_pct, '%')} from the operating speed; "
                f"{quantity(p.required_margin_pct, '%')} is needed.", "too_close")
    if g.required_margin_pct == 0.0:
        return (f"Clear: the resonance at {nc} is well damped (amplification factor below "
                f"{number(runup.AF_CRITICALLY_DAMPED)}), so it needs no separation margin; it lies "
                f"{quantity(g.separation_margin_pct, '%')} from the operating speed.", "clear")
    return (f"Clear: the critical speed {nc} is {quantity(g.separation_margin_pct, '%')} from "
            f"the operating speed; {quantity(g.required_margin_pct, '%')} is needed.", "clear")


def analyse_run_up(session: Session, record: RunUpRecord, *, by: User) -> RunUpAnalysis:
    """Critical speed(s), damping, amplification factor and margin of a stored run-up.

    Never raises on the data: a record the fit cannot use gives
    ``verdict_state == "failed"`` and the reason in ``verdict``.
    """
    from shopapp.balancing import runup  # scipy: imported on use

    require(by, "read")
    pts = list(record.points)
    slow = None
    if record.slow_roll_amplitude is not None and record.slow_roll_angle_deg is not None:
        slow = complex(record.slow_roll_amplitude
                       * np.exp(1j * math.radians(record.slow_roll_angle_deg)))
    try:
        res = runup.analyse_runup(
            [p.speed_rpm for p in pts], [p.amplitude for p in pts], [p.angle_deg for p in pts],
            slow_roll=slow, operating_speed_rpm=record.operating_speed_rpm,
            operating_range_rpm=operating_range(record), measured=record.measured,
        )
        curves = runup.runup_curves(res)
    except BalancingInputError as exc:
        return RunUpAnalysis(record_id=record.id, verdict_state="failed",
                             verdict=f"No result: {exc.message}.",
                             cautions=runup.RUNUP_CAUTIONS)
    peaks = tuple(
        PeakRow(
            critical_speed_rpm=p.critical_speed_rpm, damping_ratio=p.damping_ratio,
            amplification_factor=p.amplification_factor,
            amplification_factor_half_power=p.amplification_factor_half_power,
            separation_margin_pct=p.separation_margin_pct,
            required_margin_pct=p.required_margin_pct, margin_ok=p.margin_ok,
            fit_residual_pct=p.fit_residual_pct, bracketed=p.bracketed,
        )
        for p in res.peaks
    )
    verdict, state = _verdict(res)
    return RunUpAnalysis(record_id=record.id, verdict=verdict, verdict_state=state, peaks=peaks,
                         governing=res.governing, warnings=res.warnings, cautions=res.cautions,
                         result=res, curves=curves)


def sweep_words(record: RunUpRecord) -> str:
    """``run-up (speeds rising)`` or ``coast-down (speeds falling)``."""
    return SWEEP_WORDS.get(record.sweep, record.sweep)

