"""Runs: log a run of the rotor on the machine with its per-plane readings (and trial mass),
or strike a mistaken one out.

A use-case (docs/architecture.md, "Inside a feature package"). The rotor's number
of correction planes decides which readings a run needs: every plane of the
rotor, and none beyond them. The machine decides the reading unit and the speed
range, the rotor its permitted speed (:mod:`shopapp.jobs.limits`). A struck-out
run stays in the log but counts for nothing (``Job.runs`` leaves it out).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from shopapp.balancing.phasors import normalize_deg
from shopapp.core import audit, locks
from shopapp.core.checks import Errors as _Errors
from shopapp.core.checks import number as _num
from shopapp.core.checks import text as _text
from shopapp.core.display import counted
from shopapp.core.errors import TransitionRefused, ValidationFailed
from shopapp.core.permissions import require
from shopapp.jobs import calc as job_calc
from shopapp.jobs import limits
from shopapp.jobs.learning import score_stored_set
from shopapp.jobs.queries import evaluate
from shopapp.jobs.states import REOPEN_FROM, start
from shopapp.models import READING_UNITS, RUN_PURPOSES, Job, Run, RunReading, User, utcnow
from shopapp.registry.common import MAX_SPEED_RPM

RUN_STATES = frozenset({"booked_in", "on_machine"})
# Runs measured against the reading as received (a trial mass's effect, a correction's
# result): they need the job's initial run first (common practice, no source).
AFTER_INITIAL_PURPOSES = frozenset({"trial", "check", "final"})

Reading = tuple[int, float, float, str]
Trial = tuple[int, float, float, float]


def _blank(value: Any) -> bool:
    return value is None or (isinstance(value, str) and not value.strip())


def _angle(e: _Errors, field: str, value: Any) -> float | None:
    """An internal angle within one turn either way, −360…360° (stored as 0…360°).

    A person's typed angle is refused outside 0–360° by the form
    (:class:`shopapp.core.forms.AngleField`) before the shop convention is taken off;
    here a caller's phase angle (−180…180° from ``atan2``) is fine, but more than a
    turn is refused, never wrapped.
    """
    return _num(e, field, value, minimum=-360.0, maximum=360.0, unit="°")


def _readings(e: _Errors, readings: Sequence[Any], planes: int
              ) -> dict[int, tuple[float, float, str]]:
    """Check the readings against the rotor's planes; plane → (amplitude, angle, unit)."""
    needed = (f"Required for a {'two-plane' if planes == 2 else 'single-plane'} rotor: "
              "type a number.")
    clean: dict[int, tuple[float, float, str]] = {}
    given: set[int] = set()
    units = set()
    for item in readings:
        try:
            plane, amplitude, angle, unit = item
        except (TypeError, ValueError):
            e.add("readings", "each reading is (plane, amplitude, angle_deg, unit)")
            continue
        if planes == 1 and plane == 2:
            e.add("amplitude_2", "This rotor has one correction plane: leave plane 2 empty.")
            continue
        if plane not in range(1, planes + 1):
            e.add("readings", f"plane {plane!r} does not exist: this rotor has "
                  f"{counted(planes, 'plane')}")
            continue
        if plane in given:
            e.add("readings", f"plane {plane} is given twice")
            continue
        given.add(plane)
        for field, value in ((f"amplitude_{plane}", amplitude), (f"angle_{plane}_deg", angle)):
            if _blank(value):
                e.add(field, needed)
        amp = None if _blank(amplitude) else _num(e, f"amplitude_{plane}", amplitude,
                                                   minimum=0.0, maximum=1e9)
        ang = None if _blank(angle) else _angle(e, f"angle_{plane}_deg", angle)
        if unit not in READING_UNITS:
            e.add("unit", f"{str(unit)[:12]!r} is not a reading unit; use one of "
                  + ", ".join(READING_UNITS))
        units.add(unit)
        if amp is not None and ang is not None:
            clean[plane] = (amp, normalize_deg(ang), unit)
    for p in range(1, planes + 1):
        if p not in given:
            e.add(f"amplitude_{p}", needed)
            e.add(f"angle_{p}_deg", needed)
    if len(units) > 1:
        e.add("unit", "all readings of one run must be in the same unit")
    return clean


def _has_initial_run(job: Job) -> bool:
    """Whether the job has a live (not struck-out) initial run."""
    return any(r.purpose == "initial" for r in job.runs)


def _trial_columns(e: _Errors, trial: Any, planes: int) -> dict[str, Any]:
    """The trial mass of a trial run as Run columns (plane, mass, internal angle, radius)."""
    try:
        t_plane, t_mass, t_angle, t_radius = trial
    except (TypeError, ValueError):
        t_plane = t_mass = t_angle = t_radius = None
    if t_plane not in range(1, planes + 1):
        e.add("trial_plane", f"must be a plane of this rotor (1–{planes})")
    cols: dict[str, Any] = {
        "trial_plane": t_plane,
        "trial_mass_g": _num(e, "trial_mass_g", t_mass, above=0, maximum=1e6, unit="g"),
        "trial_angle_deg": _angle(e, "trial_angle_deg", t_angle),
        "trial_radius_mm": _num(e, "trial_radius_mm", t_radius, above=0, maximum=1e5,
                                unit="mm"),
    }
    if cols["trial_angle_deg"] is not None:
        cols["trial_angle_deg"] = normalize_deg(cols["trial_angle_deg"])
    return cols


def record_run(
    session: Session,
    job: Job,
    *,
    by: User,
    purpose: str,
    speed_rpm: float,
    readings: Sequence[Reading],
    trial: Trial | None = None,
    earlier_trial_left_on: bool = False,
    notes: str = "",
) -> Run:
    """Log a run: per-plane readings ``(plane, amplitude, angle_deg, unit)``, internal angles.

    Every correction plane of the rotor needs its reading, and a single-plane
    rotor takes none for plane 2. ``trial = (plane, mass_g, angle_deg,
    radius_mm)`` for trial runs only. A trial, check or final run needs the job's
    initial run first. The first run moves a booked-in job onto the machine.
    Angles of −360…360° are stored as [0, 360); beyond a turn they are refused.
    The speed must suit the machine and the rotor and the unit must be the
    machine's (:mod:`shopapp.jobs.limits`). Errors name the form fields
    ``amplitude_<plane>``, ``angle_<plane>_deg``, ``unit``, ``trial_*``,
    ``speed_rpm``, ``purpose``.
    """
    require(by, "work_jobs")
    if job.state not in RUN_STATES and not (purpose == "verification"
                                            and job.state == "in_tolerance"):
        raise TransitionRefused(f"Job {job.number} is {job.state.replace('_', ' ')}: runs are "
                                "logged while it is booked in or on the machine"
                                + (" (reopen it first)" if job.state in REOPEN_FROM else "."))
    planes = job.rotor.rotor_type.planes
    e = _Errors()
    if purpose not in RUN_PURPOSES:
        e.add("purpose", f"{str(purpose)[:20]!r} is not allowed; choose "
              + ", ".join(RUN_PURPOSES))
    elif purpose in AFTER_INITIAL_PURPOSES and not _has_initial_run(job):
        # A predicate: the form puts the field's label before it ("Purpose cannot be …").
        e.add("purpose", f"cannot be {purpose} before the job's initial run: log the rotor "
              f"as received first (a {purpose} run is measured against it)")
    speed = _num(e, "speed_rpm", speed_rpm, above=0, maximum=MAX_SPEED_RPM, unit="rpm")
    if speed is not None:
        limits.check_speed(e, "speed_rpm", speed, machine=job.machine,
                           rotor_type=job.rotor.rotor_type,
                           service_speed_rpm=job.service_speed_rpm)
    limits.check_reading_planes(e, "amplitude_2", planes, job.machine)
    note_text = _text(e, "notes", notes)
    clean = _readings(e, readings, planes)
    if "unit" not in e:
        for unit in {u for _, _, u in clean.values()}:
            limits.check_reading_unit(e, unit, job.machine)
    trial_cols: dict[str, Any] = {}
    if purpose == "trial":
        if trial is None:
            e.add("trial_mass_g", "a trial run needs the trial mass, its plane, angle and radius")
        else:
            trial_cols = _trial_columns(e, trial, planes)
    else:
        if trial is not None:
            e.add("trial_mass_g", "trial mass fields are only for trial runs")
        if earlier_trial_left_on:
            e.add("earlier_trial_left_on", "only for trial runs")
    e.raise_if_any()
    assert speed is not None
    if job.state == "booked_in":
        start(session, job, by=by, reason=f"first run logged ({purpose})")
    locks.hold_row(session, job)  # the next run number is decided on the committed runs
    seq = (session.scalar(select(func.max(Run.seq)).where(Run.job_id == job.id)) or 0) + 1
    run = Run(job=job, seq=seq, purpose=purpose, speed_rpm=speed, notes=note_text, by_id=by.id,
              earlier_trial_left_on=bool(earlier_trial_left_on and purpose == "trial"),
              **trial_cols)
    run.readings = [RunReading(plane=p, amplitude=a, angle_deg=g, unit=u)
                    for p, (a, g, u) in sorted(clean.items())]
    session.add(run)
    session.flush()
    session.expire(job, ["runs"])  # the counted runs are a read-only view: reload them
    if purpose in job_calc.CHECK_PURPOSES:
        # Stored so the shop measures (first-pass rate) can read the verdict in SQL.
        verdict = evaluate(session, job).verdicts.get(run.id)
        run.within_tolerance = verdict.passed if verdict is not None and verdict.judged else None
        session.flush()
    audit.record(
        session, by=by, entity="run", entity_id=run.id, action="record_run", job_id=job.id,
        after={**audit.snapshot(run, ["seq", "purpose", "speed_rpm", "trial_plane",
                                      "trial_mass_g", "trial_angle_deg", "trial_radius_mm",
                                      "earlier_trial_left_on", "within_tolerance"]),
               "readings": [[p, a, g, u] for p, (a, g, u) in sorted(clean.items())]},
    )
    if purpose in job_calc.CHECK_PURPOSES:
        score_stored_set(session, job, run, by=by)
    return run


STRIKE_STATES = RUN_STATES


def rejudge_check_runs(session: Session, job: Job) -> None:
    """Store the verdicts of the job's check runs again after something was struck out.

    The shop measures read the stored verdicts; a struck trial run (or correction)
    changes what they were judged with.
    """
    verdicts = evaluate(session, job).verdicts
    for other in job.runs:
        if other.purpose in job_calc.CHECK_PURPOSES:
            v = verdicts.get(other.id)
            other.within_tolerance = v.passed if v is not None and v.judged else None
    session.flush()


def require_strike_state(job: Job, what: str) -> None:
    """Refuse striking ``what`` (runs, corrections) out unless the job is booked in or on
    the machine: a certified job's evidence is frozen."""
    if job.state not in STRIKE_STATES:
        raise TransitionRefused(
            f"Job {job.number} is {job.state.replace('_', ' ')}: {what} are struck out while "
            "it is on the machine" + (" (reopen it first)" if job.state in REOPEN_FROM
                                      else "."))


def mark_struck(session: Session, job: Job, row: Any, *, by: User, reason: str,
                collection: str) -> str:
    """Mark a run or correction of ``job`` struck out by ``by`` for ``reason`` (checked,
    errors name ``reason``), under the job's row lock; ``collection`` is the job's
    relationship to refresh. Returns the reason as stored."""
    e = _Errors()
    why = _text(e, "reason", reason, max_len=500, required=True)
    e.raise_if_any()
    locks.hold_row(session, job)
    row.struck_at = utcnow()
    row.struck_by_id = by.id
    row.struck_reason = why
    session.flush()
    session.expire(job, [collection])
    return why


def strike_run(session: Session, job: Job, run: Run, *, by: User, reason: str) -> Run:
    """Strike a mistaken run out: it stays in the log, marked, and counts for nothing.

    Never deleted. Allowed while the job is booked in or on the machine (a certified
    job's evidence is frozen; reopen it first). The stored verdicts of the job's other
    check runs are judged again without it. A stored influence set's last prediction
    score, if a struck check run gave it, stays as it was. Errors name ``reason``.
    """
    require(by, "strike_runs")
    if run.job_id != job.id:
        raise ValidationFailed("run_id", f"run {run.id} is not a run of job {job.number}")
    require_strike_state(job, "runs")
    if run.struck_at is not None:
        raise TransitionRefused(f"Run {run.seq} was already struck out.")
    why = mark_struck(session, job, run, by=by, reason=reason, collection="runs")
    run.within_tolerance = None
    rejudge_check_runs(session, job)
    audit.record(session, by=by, entity="run", entity_id=run.id, action="strike_run",
                 job_id=job.id, before={"struck": False},
                 after={"struck": True, "seq": run.seq, "reason": why})
    return run
