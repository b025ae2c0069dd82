"""Corrections: record what was actually fitted (or removed) in one plane.

A use-case (docs/architecture.md, "Inside a feature package"). The recorded
correction may differ from the advice; the first correction that follows a
stored influence set's advice fixes that set on the job
(:func:`shopapp.jobs.learning.record_influence_set`).
"""

from __future__ import annotations

import cmath
import math
from collections.abc import Mapping, Sequence
from typing import Any

from sqlalchemy.orm import Session

from shopapp.balancing.phasors import normalize_deg
from shopapp.balancing.positions import combine_masses, position_angles_deg
from shopapp.core import audit, locks
from shopapp.core.checks import Errors as _Errors
from shopapp.core.checks import number as _num
from shopapp.core.checks import plain_digits
from shopapp.core.display import plain, quantity
from shopapp.core.errors import TransitionRefused, ValidationFailed
from shopapp.core.permissions import require
from shopapp.jobs.learning import record_influence_set
from shopapp.jobs.runs import mark_struck, rejudge_check_runs, require_strike_state
from shopapp.models import CORRECTION_ACTIONS, Correction, Job, RotorType, Run, User


def _parse_split(e: _Errors, split: Any, rt: RotorType, plane: int) -> list[dict[str, Any]] | None:
    if split is None or split == [] or split == "":
        return None
    count = rt.positions_1 if plane == 1 else rt.positions_2
    first = rt.first_position_1_deg if plane == 1 else rt.first_position_2_deg
    if count is None or count < 3:
        e.add("split", f"plane {plane} has no fixed positions to split onto")
        return None
    angles = position_angles_deg(count, first)
    out = []
    if not isinstance(split, Sequence) or isinstance(split, str):
        e.add("split", "must be a list of positions and masses")
        return None
    for part in split:
        if not isinstance(part, Mapping):
            e.add("split", "each part is a position and a mass")
            return None
        pos = part.get("position")
        if isinstance(pos, bool) or not isinstance(pos, int) or not 1 <= pos <= count:
            e.add("split", f"position {pos!r} does not exist: plane {plane} has positions "
                  f"1–{count}")
            return None
        mass = _num(e, "split", part.get("mass_g"), above=0, maximum=1e6, unit="g")
        if mass is None:
            return None
        out.append({"position": pos, "angle_deg": angles[pos - 1], "mass_g": mass})
    return out or None


#: How far the weights of a split may miss the correction they make up, as a share of
#: its mass: rounding to stock sizes misses by a few per cent (common practice, no source);
#: more means the split and the recorded mass disagree.
SPLIT_MISS_SHARE = 0.25


def _check_split_sum(e: _Errors, parts: Sequence[Mapping[str, Any]], mass_g: float,
                     angle_deg: float) -> None:
    """The split's weights must add up (as vectors) to about the recorded mass and angle:
    a record that says 53 g in one place and 200 g of weights in another contradicts
    itself (the certificate would print both)."""
    total = combine_masses([p["mass_g"] for p in parts], [p["angle_deg"] for p in parts])
    miss = abs(total.vector_g - cmath.rect(mass_g, math.radians(angle_deg)))
    if miss > SPLIT_MISS_SHARE * mass_g:
        e.add("split", f"adds up to {quantity(total.mass_g, 'g')} at "
              f"{plain(round(total.angle_deg, 1))}°, not the {quantity(mass_g, 'g')} at "
              f"{plain(round(angle_deg, 1))}° recorded; check the split or the mass")


def replaceable_weights(job: Job, plane: int) -> list[Correction]:
    """The job's added weights in ``plane`` not replaced by a later one (oldest first)."""
    replaced = {c.replaces_correction_id for c in job.corrections if c.replaces_correction_id}
    return [c for c in job.corrections
            if c.plane == plane and c.action == "add" and c.id not in replaced]


def _check_replaced(e: _Errors, job: Job, ref: Any, plane: int, action: str) -> None:
    """The weight taken off must be an added weight of this job and plane, not replaced yet."""
    if ref is None:
        return
    field = "replaces_correction_id"
    if action != "add":
        e.add(field, "only an added weight is fitted in place of another")
        return
    old = next((c for c in job.corrections if isinstance(ref, int) and not isinstance(ref, bool)
                and c.id == ref), None)
    if old is None or old.plane != plane or old.action != "add":
        e.add(field, f"must be a weight added in plane {plane} of this job")
    elif old not in replaceable_weights(job, plane):
        e.add(field, "that weight was already replaced by a later one")


def _check_one_per_run(e: _Errors, job: Job, run_id: int | None, plane: int,
                       replaces: Any) -> None:
    """One correction per plane answers a run (common practice, no source): a second one
    is most often the same weight recorded twice (two people at once, say). A weight
    swapped before the next run is recorded as fitted in place of the first."""
    if run_id is None:
        return
    earlier = [c for c in job.corrections if c.run_id == run_id and c.plane == plane]
    replaced = {c.replaces_correction_id for c in job.corrections}
    standing = [c for c in earlier if c.id not in replaced and c.id != replaces]
    if standing:
        c = standing[-1]
        seq = next((r.seq for r in job.runs if r.id == run_id), None)
        e.add("run_id", f"plane {plane} already has a correction answering run {seq}: "
              f"{quantity(c.mass_g, 'g')} {'added' if c.action == 'add' else 'removed'}, "
              f"recorded {c.applied_at:%Y-%m-%d %H:%M}. Log a check run first, strike that "
              "one out, or record this weight as fitted in place of it")


def _answered_run_id(e: _Errors, session: Session, job: Job, ref: Any) -> int | None:
    """The run a correction answers: a live run of this job, or none when ``ref`` is blank.

    The page carries it in a hidden field, so anything else (text, an unknown id, a run
    of another job) was tampered with or is stale, and is refused rather than dropped.
    """
    if ref is None or ref == "":
        return None
    if isinstance(ref, str) and plain_digits(ref) and len(ref) <= 18:
        ref = int(ref)
    run = (session.get(Run, ref) if isinstance(ref, int) and not isinstance(ref, bool)
           and 0 < ref < 2**63 else None)
    if run is None or run.job_id != job.id:
        e.add("run_id", f"no such run on this job ({str(ref)[:20]!r})")
        return None
    if run.struck_at is not None:
        e.add("run_id", f"run {run.seq} was struck out: a correction cannot answer it")
        return None
    if run.purpose == "trial":  # its reading holds the trial mass, not the rotor's unbalance
        e.add("run_id", f"run {run.seq} is a trial run: a correction answers an initial, "
              "check or final run")
        return None
    return run.id


def record_correction(
    session: Session,
    job: Job,
    *,
    by: User,
    run_id: int | str | None,
    plane: int,
    action: str,
    mass_g: float,
    angle_deg: float,
    radius_mm: float,
    advised_mass_g: float | None = None,
    advised_angle_deg: float | None = None,
    split: Sequence[Mapping[str, Any]] | None = None,
    drill_diameter_mm: float | None = None,
    drill_depth_mm: float | None = None,
    drill_holes: int | None = None,
    replaces_correction_id: int | None = None,
) -> Correction:
    """Record what was actually fitted (or removed) in one plane; it may differ from the advice.

    ``mass_g``/``angle_deg`` are the single equivalent correction (internal
    angle: where mass was added, or where it was removed); ``split`` lists the
    parts fitted on fixed positions (``{"position", "mass_g"}``, angles from the
    rotor type). Drill fields are for removal only. ``replaces_correction_id``
    names an added weight of this job and plane, still on the rotor, that this
    added weight was fitted in place of (it was taken off); without it a plane takes
    one correction per run (decided under the job's row lock, so two people saving at
    once do not both record one). ``run_id`` is the run
    the correction answers, as an id or the page's hidden text ("" for none).
    """
    require(by, "work_jobs")
    # Decided on the committed corrections: two people saving at once are serialised.
    locks.hold_row(session, job)
    if job.state != "on_machine":
        raise TransitionRefused(f"Job {job.number} is {job.state.replace('_', ' ')}: corrections "
                                "are recorded while it is on the machine.")
    rt = job.rotor.rotor_type
    e = _Errors()
    if plane not in range(1, rt.planes + 1):
        e.add("plane", f"must be a plane of this rotor (1–{rt.planes})")
    if action not in CORRECTION_ACTIONS:
        e.add("action", f"{str(action)[:20]!r} is not allowed; choose add or remove")
    run_id = _answered_run_id(e, session, job, run_id)
    cols: dict[str, Any] = {
        "mass_g": _num(e, "mass_g", mass_g, above=0, maximum=1e6, unit="g"),
        "angle_deg": _num(e, "angle_deg", angle_deg, minimum=-1e6, maximum=1e6),
        "radius_mm": _num(e, "radius_mm", radius_mm, above=0, maximum=1e5, unit="mm"),
        "advised_mass_g": _num(e, "advised_mass_g", advised_mass_g, required=False, minimum=0),
        "advised_angle_deg": _num(e, "advised_angle_deg", advised_angle_deg, required=False,
                                  minimum=-1e6, maximum=1e6),
        "drill_diameter_mm": _num(e, "drill_diameter_mm", drill_diameter_mm, required=False,
                                  above=0, maximum=1000, unit="mm"),
        "drill_depth_mm": _num(e, "drill_depth_mm", drill_depth_mm, required=False, above=0,
                               maximum=10000, unit="mm"),
    }
    holes = _num(e, "drill_holes", drill_holes, required=False, minimum=1, maximum=100)
    if holes is not None and not float(holes).is_integer():
        e.add("drill_holes", f"must be a whole number, got {plain(holes)}")
    cols["drill_holes"] = int(holes) if holes is not None and float(holes).is_integer() else None
    if action == "add":
        for f in ("drill_diameter_mm", "drill_depth_mm", "drill_holes"):
            if cols[f] is not None:
                e.add(f, "drill details are only for removal")
    for f in ("angle_deg", "advised_angle_deg"):
        if cols[f] is not None:
            cols[f] = normalize_deg(cols[f])
    parts = _parse_split(e, split, rt, plane) if plane in (1, 2) else None
    if parts and cols["mass_g"] is not None and cols["angle_deg"] is not None:
        _check_split_sum(e, parts, cols["mass_g"], cols["angle_deg"])
    _check_replaced(e, job, replaces_correction_id, plane, action)
    _check_one_per_run(e, job, run_id, plane, replaces_correction_id)
    e.raise_if_any()
    record_influence_set(session, job, run_id, by=by)
    corr = Correction(job=job, run_id=run_id, plane=plane, action=action, split=parts,
                      applied_by_id=by.id, replaces_correction_id=replaces_correction_id, **cols)
    session.add(corr)
    session.flush()
    session.expire(job, ["corrections"])  # the view of the corrections that count
    audit.record(session, by=by, entity="correction", entity_id=corr.id,
                 action="record_correction", after=audit.snapshot(corr), job_id=job.id)
    return corr


def strike_correction(session: Session, job: Job, corr: Correction, *, by: User,
                      reason: str) -> Correction:
    """Strike out a correction recorded by mistake (twice, say): it stays listed, marked,
    and counts for nothing (advice, calculations, certificate).

    Never deleted; the same rules as :func:`shopapp.jobs.runs.strike_run`: the people
    who strike runs, while the job is booked in or on the machine (a certified job's
    evidence is frozen; reopen it first). A weight another correction was fitted in
    place of is struck only after that one. An influence set the correction fixed on
    the job stays fixed. Errors name ``reason``.
    """
    require(by, "strike_runs")
    if corr.job_id != job.id:
        raise ValidationFailed("correction_id",
                               f"correction {corr.id} is not a correction of job {job.number}")
    require_strike_state(job, "corrections")
    if corr.struck_at is not None:
        raise TransitionRefused(f"That correction (plane {corr.plane}, "
                                f"{quantity(corr.mass_g, 'g')}) was already struck out.")
    later = next((c for c in job.corrections if c.replaces_correction_id == corr.id), None)
    if later is not None:
        raise TransitionRefused(
            f"The weight of {quantity(later.mass_g, 'g')} in plane {later.plane} was fitted in "
            "place of this one: strike that correction out first.")
    why = mark_struck(session, job, corr, by=by, reason=reason, collection="corrections")
    rejudge_check_runs(session, job)
    audit.record(session, by=by, entity="correction", entity_id=corr.id,
                 action="strike_correction", job_id=job.id, before={"struck": False},
                 after={"struck": True, "plane": corr.plane, "mass_g": corr.mass_g,
                        "reason": why})
    return corr
