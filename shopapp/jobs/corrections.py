"""Corrections: record what was actually fitted (or removed) in one plane.

A use-case (docs/architecture.md, "Inside a feature package"). The recorded
correction may differ from the advice; the first correction that follows a
stored influence set's advice fixes that set on the job
(:func:`shopapp.jobs.learning.record_influence_set`).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from sqlalchemy.orm import Session

from shopapp.balancing.phasors import normalize_deg
from shopapp.balancing.positions import position_angles_deg
from shopapp.core import audit
from shopapp.core.checks import Errors as _Errors
from shopapp.core.checks import number as _num
from shopapp.core.display import plain
from shopapp.core.errors import TransitionRefused
from shopapp.core.permissions import require
from shopapp.jobs.learning import record_influence_set
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


def record_correction(
    session: Session,
    job: Job,
    *,
    by: User,
    run_id: int | None,
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
) -> Correction:
    """Record what was actually fitted (or removed) in one plane; it may differ from the advice.

    ``mass_g``/``angle_deg`` are the single equivalent correction (internal
    angle: where mass was added, or where it was removed); ``split`` lists the
    parts fitted on fixed positions (``{"position", "mass_g"}``, angles from the
    rotor type). Drill fields are for removal only.
    """
    require(by, "work_jobs")
    if job.state != "on_machine":
        raise TransitionRefused(f"Job {job.number} is {job.state.replace('_', ' ')}: corrections "
                                "are recorded while it is on the machine.")
    rt = job.rotor.rotor_type
    e = _Errors()
    if plane not in range(1, rt.planes + 1):
        e.add("plane", f"must be a plane of this rotor (1–{rt.planes})")
    if action not in CORRECTION_ACTIONS:
        e.add("action", f"{str(action)[:20]!r} is not allowed; choose add or remove")
    if run_id is not None:
        run = session.get(Run, run_id) if isinstance(run_id, int) else None
        if run is None or run.job_id != job.id:
            e.add("run_id", "must be a run of this job")
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
    e.raise_if_any()
    record_influence_set(session, job, run_id, by=by)
    corr = Correction(job=job, run_id=run_id, plane=plane, action=action, split=parts,
                      applied_by_id=by.id, **cols)
    session.add(corr)
    session.flush()
    audit.record(session, by=by, entity="correction", entity_id=corr.id,
                 action="record_correction", after=audit.snapshot(corr), job_id=job.id)
    return corr
