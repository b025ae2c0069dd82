"""Importing runs from a file: plan (the preview) and import (all or nothing).

A use-case (docs/architecture.md, "Inside a feature package"). A file is read as
shopapp's exchange format or, when it is not one, as the export of the given machine
through that machine's saved mapping (:mod:`shopapp.intake.mappings`). Each run then
goes to its job by job number or by the rotor's serial (the rotor's job in the shop),
and is logged with :func:`shopapp.jobs.runs.record_run`, so every rule of a typed run
holds — the machine's reading unit and speed range, the rotor's planes, the angle range,
the job's state.

:func:`plan_file` does exactly what :func:`import_file` does inside a savepoint that is
rolled back, so the preview names every refusal the import would meet and writes
nothing. :func:`import_file` writes every run of the file or none: one refused run
refuses the file. Each imported run's audit trail carries its source (file name,
SHA-256, line); the file's hash is kept (:class:`~shopapp.models.ImportedFile`), and the
same bytes are never imported twice.
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any, cast

from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.core import audit
from shopapp.core.display import counted, plain
from shopapp.core.display import date as show_date
from shopapp.core.errors import PermissionDenied, ServiceError, ValidationFailed
from shopapp.core.permissions import require
from shopapp.intake import files
from shopapp.intake.mappings import layout_of, mapping_of
from shopapp.jobs.queries import OPEN_STATES
from shopapp.jobs.runs import Reading, Trial, record_run
from shopapp.models import ImportedFile, Job, Machine, Rotor, User

MAX_FILE_NAME = 255


def sha256_of(data: bytes) -> str:
    """The SHA-256 (hex) of a file's bytes: its identity for "never twice"."""
    return hashlib.sha256(data).hexdigest()


@dataclass
class PlannedRun:
    """One row of the file: the job and run it makes, or why it is refused."""

    where: str
    job_number: str = ""
    job_id: int | None = None
    summary: str = ""  # "check run at 600 rpm, 2 planes in g·mm"
    seq: int | None = None  # the run number it would get / got
    refusal: str = ""


@dataclass
class ImportPlan:
    """What a file does: its rows planned, or the whole file refused."""

    file_name: str
    sha256: str
    kind: str = ""
    runs: list[PlannedRun] = field(default_factory=list)
    refusal: str = ""  # the whole file (encoding, size, already imported, ...)

    @property
    def refused(self) -> list[PlannedRun]:
        return [r for r in self.runs if r.refusal]

    @property
    def ok(self) -> bool:
        return not self.refusal and bool(self.runs) and not self.refused

    def why(self) -> str:
        """Every refusal, one per line (for a page, a terminal or a ``.why.txt``)."""
        if self.refusal:
            return self.refusal
        return "\n".join(f"{r.where}: {r.refusal}" for r in self.refused)


class ImportRefused(ValidationFailed):
    """The file was refused: nothing of it was written. ``plan`` says why, row by row."""

    def __init__(self, plan: ImportPlan) -> None:
        first = plan.why().splitlines()[0] if plan.why() else "nothing to import"
        more = len(plan.refused) - 1
        super().__init__("file", f"{plan.file_name}: {first}"
                         + (f" (and {counted(more, 'more refused run')})" if more > 0 else ""))
        self.plan = plan


def _messages(exc: ServiceError) -> str:
    if isinstance(exc, ValidationFailed):
        return "; ".join(f"{f}: {m}" for f, m in exc.errors.items())
    return exc.message


def _job_for(session: Session, values: dict[str, Any]) -> Job:
    """The job a row names: its job number, or the rotor serial's job in the shop."""
    number, serial = values.get("job"), values.get("serial")
    job: Job | None = None
    if number is not None:
        job = session.scalars(select(Job).where(Job.number == number)).first()
        if job is None:
            raise ValidationFailed("job", f"no job {number[:40]!r}")
    if serial is not None:
        rotors = list(session.scalars(select(Rotor).where(Rotor.serial_number == serial)
                                      .limit(3)))
        if not rotors:
            raise ValidationFailed("serial", f"no rotor with serial {serial[:40]!r}")
        if job is not None:
            if job.rotor_id not in {r.id for r in rotors}:
                raise ValidationFailed("serial", f"job {job.number} is for rotor "
                                       f"{job.rotor.serial_number!r}, not {serial[:40]!r}")
            return job
        jobs = list(session.scalars(
            select(Job).where(Job.rotor_id.in_([r.id for r in rotors]),
                              Job.state.in_(OPEN_STATES)).limit(2)))
        if not jobs:
            raise ValidationFailed("serial", f"rotor {serial[:40]!r} has no job in the shop")
        if len(jobs) > 1:
            raise ValidationFailed("serial", f"serial {serial[:40]!r} has more than one job "
                                   "in the shop (rotors of several customers): give the job")
        job = jobs[0]
    assert job is not None
    return job


def _record(session: Session, row: files.Row, job: Job, machine: Machine | None, *,
            by: User, source: dict[str, Any]) -> Any:
    v = row.values
    if machine is not None and job.machine_id != machine.id:
        on = job.machine.name if job.machine is not None else "no machine"
        raise ValidationFailed("machine", f"job {job.number} is booked on {on}, this file "
                               f"comes from {machine.name}")
    if v.get("machine") is not None:
        expected = machine.name if machine is not None else (
            job.machine.name if job.machine is not None else None)
        if v["machine"] != expected:
            raise ValidationFailed("machine", f"the file says machine {v['machine'][:40]!r}, "
                                   f"job {job.number} is on {expected or 'no machine'}")
    readings: list[Reading] = [(1, v["amplitude_1"], v["angle_1_deg"], v["unit"])]
    if v.get("amplitude_2") is not None or v.get("angle_2_deg") is not None:
        # A half-given plane 2 goes on as it is: record_run names the missing value.
        readings.append(cast(Reading, (2, v.get("amplitude_2"), v.get("angle_2_deg"),
                                       v["unit"])))
    trial: Trial | None = None
    trial_keys = ("trial_plane", "trial_mass_g", "trial_angle_deg", "trial_radius_mm")
    if any(v.get(k) is not None for k in trial_keys):
        trial = (v.get("trial_plane"), v.get("trial_mass_g"),  # type: ignore[assignment]
                 v.get("trial_angle_deg"), v.get("trial_radius_mm"))
    run = record_run(session, job, by=by, purpose=v["purpose"], speed_rpm=v["speed_rpm"],
                     readings=readings, trial=trial, notes=v.get("notes") or "")
    if v.get("taken_at") is not None:
        run.taken_at = v["taken_at"]  # the machine's own time of the run
        session.flush()
    audit.record(session, by=by, entity="run", entity_id=run.id, action="import_run",
                 job_id=job.id, after={"source": {**source, "line": row.where},
                                       "seq": run.seq})
    return run


def _summary(v: dict[str, Any]) -> str:
    planes = 2 if v.get("amplitude_2") is not None else 1
    return (f"{v.get('purpose')} run at {plain(v.get('speed_rpm'))} rpm, "
            f"{counted(planes, 'plane')} in {v.get('unit')}")


def _read(data: bytes, session: Session, machine: Machine | None) -> files.ParsedFile:
    refusal = files.size_refusal(len(data))
    if refusal:
        raise files.refuse(refusal)
    if files.is_exchange(data):
        return files.parse_exchange(data)
    if machine is None:
        raise files.refuse(f"not a {files.FORMAT_NAME} file (its first line is not "
                           f"{files.CSV_MARK!r} and it is not JSON); a machine's own export "
                           "is read with that machine's mapping: name the machine")
    mapping = mapping_of(session, machine)
    if mapping is None:
        raise files.refuse(f"not a {files.FORMAT_NAME} file, and machine {machine.name} has "
                           "no saved column mapping (quality saves one on the machine's "
                           "mapping page)")
    return files.parse_csv(data, layout_of(mapping))


def _walk(session: Session, data: bytes, *, file_name: str, machine: Machine | None,
          by: User) -> tuple[ImportPlan, list[Any]]:
    """Read the file and log each run in its own savepoint; the plan and the runs made."""
    name = file_name.replace("\\", "/").rsplit("/", 1)[-1][:MAX_FILE_NAME] or "unnamed"
    plan = ImportPlan(file_name=name, sha256=sha256_of(data))
    made: list[Any] = []
    earlier = session.scalars(select(ImportedFile).where(ImportedFile.sha256 == plan.sha256)
                              ).first()
    if earlier is not None:
        plan.refusal = (f"this file was already imported on {show_date(earlier.imported_at)} "
                        f"as {earlier.file_name!r} ({earlier.outcome})")
        return plan, made
    try:
        parsed = _read(data, session, machine)
    except ValidationFailed as exc:
        plan.refusal = exc.errors.get("file", exc.message)
        return plan, made
    plan.kind = parsed.kind
    source = {"file": name, "sha256": plan.sha256, "kind": parsed.kind}
    for row in parsed.rows:
        item = PlannedRun(where=row.where)
        plan.runs.append(item)
        if not row.ok:
            item.refusal = "; ".join(row.errors)
            continue
        item.summary = _summary(row.values)
        try:
            with session.begin_nested():
                job = _job_for(session, row.values)
                item.job_number, item.job_id = job.number, job.id
                run = _record(session, row, job, machine, by=by, source=source)
                item.seq = run.seq
                made.append(run)
        except PermissionDenied:
            raise
        except ServiceError as exc:
            item.refusal = _messages(exc)
    return plan, made


def plan_file(session: Session, data: bytes, *, file_name: str, machine: Machine | None,
              by: User) -> ImportPlan:
    """The preview of importing ``data``: per row the job and run, or the refusal and why.

    Writes nothing: every run is logged as the import would, inside a savepoint that is
    rolled back, so the rules applied are exactly the import's.
    """
    require(by, "work_jobs")
    outer = session.begin_nested()
    try:
        plan, _ = _walk(session, data, file_name=file_name, machine=machine, by=by)
    finally:
        outer.rollback()
    return plan


def import_file(session: Session, data: bytes, *, file_name: str, machine: Machine | None,
                by: User, source: str, expect_sha256: str | None = None) -> ImportPlan:
    """Import every run of ``data``, or raise :class:`ImportRefused` (the caller rolls back).

    ``expect_sha256``: the hash of the previewed file; other bytes are refused, so what
    is imported is exactly what was previewed. ``source`` is ``upload``, ``file`` or
    ``watch``. Flushes; never commits.
    """
    require(by, "work_jobs")
    if expect_sha256 is not None and sha256_of(data) != expect_sha256:
        raise ValidationFailed("file", "the file is not the one previewed: preview it again")
    plan, made = _walk(session, data, file_name=file_name, machine=machine, by=by)
    if not plan.ok:
        raise ImportRefused(plan)
    jobs = sorted({r.job_number for r in plan.runs})
    outcome = f"{counted(len(made), 'run')} into {', '.join(jobs)}"[:1000]
    imported = ImportedFile(sha256=plan.sha256, file_name=plan.file_name, source=source,
                            machine_id=machine.id if machine is not None else None,
                            by_id=by.id, outcome=outcome)
    session.add(imported)
    session.flush()
    audit.record(session, by=by, entity="imported_file", entity_id=imported.id,
                 action="import_file", after={"file": plan.file_name, "sha256": plan.sha256,
                                              "kind": plan.kind, "outcome": outcome,
                                              "runs": [r.id for r in made]})
    return plan


def already_imported(session: Session, sha256: str) -> ImportedFile | None:
    """The earlier import of these bytes, if any."""
    return session.scalars(select(ImportedFile).where(ImportedFile.sha256 == sha256)).first()


def imports_of(session: Session, machine: Machine | None = None,
               limit: int = 50) -> Sequence[ImportedFile]:
    """The latest imported files (of one machine), newest first."""
    stmt = select(ImportedFile).order_by(ImportedFile.imported_at.desc(), ImportedFile.id.desc())
    if machine is not None:
        stmt = stmt.where(ImportedFile.machine_id == machine.id)
    return session.scalars(stmt.limit(limit)).all()
