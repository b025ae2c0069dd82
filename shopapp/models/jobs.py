"""Jobs (work orders), their runs, readings, corrections and learned coefficients."""

from __future__ import annotations

import datetime as dt
from typing import TYPE_CHECKING, Any

from sqlalchemy import (
    JSON,
    Boolean,
    CheckConstraint,
    Date,
    Float,
    ForeignKey,
    Index,
    Integer,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import Mapped, mapped_column, relationship

from shopapp.models.base import (
    Base,
    IntPK,
    Timestamp,
    UTCDateTime,
    angle_range,
    one_of,
    positive,
    utcnow,
)
from shopapp.models.registry import READING_UNITS, Customer, Machine, Rotor

if TYPE_CHECKING:
    from shopapp.models.imports import ImportedJob

JOB_STATES = ("booked_in", "on_machine", "in_tolerance", "certified", "dispatched", "rejected")
JOB_KINDS = ("new", "return")
TOLERANCE_METHODS = ("grade", "4w/n", "explicit")
RUN_PURPOSES = ("initial", "trial", "check", "final", "verification")
CORRECTION_ACTIONS = ("add", "remove")


class Job(Base):
    __tablename__ = "job"
    __table_args__ = (
        one_of("state", JOB_STATES),
        one_of("kind", JOB_KINDS),
        one_of("tolerance_method", TOLERANCE_METHODS),
        positive("service_speed_rpm", nullable=False),
        positive("balancing_speed_rpm", nullable=False),
        positive("tolerance_grade"),
        positive("journal_load_a_kg"),
        positive("journal_load_b_kg"),
        positive("explicit_limit_1_gmm"),
        positive("explicit_limit_2_gmm"),
        CheckConstraint("reopen_count >= 0", name="reopen_count_nonneg"),
        CheckConstraint(
            "(kind = 'return') = (return_of_job_id IS NOT NULL)", name="return_links_earlier"
        ),
        CheckConstraint(
            "promised_on IS NULL OR promised_on >= received_on", name="promised_after_received"
        ),
        CheckConstraint(
            "dispatched_on IS NULL OR dispatched_on >= received_on",
            name="dispatched_after_received",
        ),
        CheckConstraint(
            "tolerance_method <> 'grade' OR tolerance_grade IS NOT NULL", name="grade_given"
        ),
        CheckConstraint(
            "tolerance_method <> '4w/n' OR journal_load_a_kg IS NOT NULL", name="load_given"
        ),
        CheckConstraint(
            "tolerance_method <> 'explicit' OR explicit_limit_1_gmm IS NOT NULL",
            name="explicit_given",
        ),
        Index("ix_job_state_received", "state", "received_on"),
        # The job list: newest received first, the id in the index too (deep pages).
        Index("ix_job_received_id", "received_on", "id"),
    )

    id: Mapped[IntPK]
    number: Mapped[str] = mapped_column(String(40), unique=True, nullable=False)
    customer_id: Mapped[int] = mapped_column(
        ForeignKey("customer.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    rotor_id: Mapped[int] = mapped_column(
        ForeignKey("rotor.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    machine_id: Mapped[int | None] = mapped_column(
        ForeignKey("machine.id", ondelete="RESTRICT"), index=True
    )
    # Shop arbor the rotor is balanced on (traceability), if any.
    arbor_id: Mapped[int | None] = mapped_column(
        ForeignKey("arbor.id", ondelete="RESTRICT"), index=True
    )
    operator_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), index=True
    )
    # The stored influence set the job's corrections were computed from, fixed when the
    # first correction from it is recorded, so a set learned later never re-judges the job.
    # use_alter: influence_set.source_job_id points back at job (a cycle of foreign keys).
    influence_set_id: Mapped[int | None] = mapped_column(
        ForeignKey("influence_set.id", ondelete="RESTRICT", use_alter=True), index=True
    )
    state: Mapped[str] = mapped_column(String(16), nullable=False, default="booked_in", index=True)
    kind: Mapped[str] = mapped_column(String(8), nullable=False, default="new", index=True)
    return_of_job_id: Mapped[int | None] = mapped_column(
        ForeignKey("job.id", ondelete="RESTRICT"), index=True
    )
    customer_order_ref: Mapped[str] = mapped_column(String(100), nullable=False, default="")
    received_on: Mapped[dt.date] = mapped_column(Date, nullable=False, index=True)
    promised_on: Mapped[dt.date | None] = mapped_column(Date, index=True)
    dispatched_on: Mapped[dt.date | None] = mapped_column(Date, index=True)
    # When the job first reached in_tolerance (the rework-rate denominator's date).
    first_in_tolerance_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime(), index=True)
    tolerance_method: Mapped[str] = mapped_column(String(10), nullable=False, default="grade")
    tolerance_grade: Mapped[float | None] = mapped_column(Float)
    journal_load_a_kg: Mapped[float | None] = mapped_column(Float)
    journal_load_b_kg: Mapped[float | None] = mapped_column(Float)
    explicit_limit_1_gmm: Mapped[float | None] = mapped_column(Float)
    explicit_limit_2_gmm: Mapped[float | None] = mapped_column(Float)
    service_speed_rpm: Mapped[float] = mapped_column(Float, nullable=False)
    balancing_speed_rpm: Mapped[float] = mapped_column(Float, nullable=False)
    residual_test_required: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False)
    reopen_count: Mapped[int] = mapped_column(Integer, nullable=False, default=0)
    reject_reason: Mapped[str] = mapped_column(Text, nullable=False, default="")
    notes: Mapped[str] = mapped_column(Text, nullable=False, default="")
    created_at: Mapped[Timestamp]
    updated_at: Mapped[dt.datetime] = mapped_column(
        UTCDateTime(), nullable=False, default=utcnow, onupdate=utcnow
    )

    customer: Mapped[Customer] = relationship()
    rotor: Mapped[Rotor] = relationship()
    machine: Mapped[Machine | None] = relationship()
    operator: Mapped[Any] = relationship("User")
    return_of: Mapped[Job | None] = relationship(remote_side="Job.id")
    # Every run ever logged, struck-out ones included: the run log shows them all.
    run_log: Mapped[list[Run]] = relationship(back_populates="job", order_by="Run.seq")
    # The runs that count: struck-out runs are left out of every calculation, so any
    # code reading ``job.runs`` (verdicts, coefficients, advice, certificates) skips them.
    runs: Mapped[list[Run]] = relationship(
        primaryjoin="and_(Job.id == Run.job_id, Run.struck_at.is_(None))",
        order_by="Run.seq", viewonly=True,
    )
    # Every correction ever recorded, struck-out ones included (the job page's table).
    correction_log: Mapped[list[Correction]] = relationship(
        back_populates="job", order_by="Correction.id"
    )
    # The corrections that count, as ``runs`` above: a struck-out correction (recorded
    # twice by mistake) is left out of the advice, the calculations and the certificate.
    corrections: Mapped[list[Correction]] = relationship(
        primaryjoin="and_(Job.id == Correction.job_id, Correction.struck_at.is_(None))",
        order_by="Correction.id", viewonly=True,
    )
    transitions: Mapped[list[JobTransition]] = relationship(
        back_populates="job", order_by="JobTransition.id"
    )
    # A past job brought over from spreadsheets (shopapp.imports) has this row: its final
    # residual and old verdict. No column on job: adding one would rebuild the table on
    # SQLite and drop the evidence triggers that name it (migrations 0012, 0013, 0020).
    imported_record: Mapped[ImportedJob | None] = relationship(viewonly=True)

    @property
    def imported(self) -> bool:
        """A past job imported from spreadsheets (no runs; left out of the measures)."""
        return self.imported_record is not None


class JobTransition(Base):
    """Every state change of a job, with its reason (rework and rejection reasons)."""

    __tablename__ = "job_transition"
    __table_args__ = (
        one_of("to_state", JOB_STATES),
        CheckConstraint(
            "from_state IS NULL OR from_state IN ('booked_in', 'on_machine', 'in_tolerance', "
            "'certified', 'dispatched', 'rejected')",
            name="from_state_allowed",
        ),
        Index("ix_job_transition_to_state_at", "to_state", "at"),
    )

    id: Mapped[IntPK]
    job_id: Mapped[int] = mapped_column(
        ForeignKey("job.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    from_state: Mapped[str | None] = mapped_column(String(16))
    to_state: Mapped[str] = mapped_column(String(16), nullable=False)
    reason: Mapped[str] = mapped_column(Text, nullable=False, default="")
    by_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), index=True
    )
    at: Mapped[Timestamp]

    job: Mapped[Job] = relationship(back_populates="transitions")


class Run(Base):
    """One spin of the rotor on the machine, with its readings per plane."""

    __tablename__ = "run"
    __table_args__ = (
        UniqueConstraint("job_id", "seq"),
        one_of("purpose", RUN_PURPOSES),
        positive("speed_rpm", nullable=False),
        positive("trial_mass_g"),
        positive("trial_radius_mm"),
        angle_range("trial_angle_deg"),
        CheckConstraint("seq >= 1", name="seq_positive"),
        CheckConstraint("trial_plane IS NULL OR trial_plane IN (1, 2)", name="trial_plane_allowed"),
        CheckConstraint(
            "(purpose = 'trial') = (trial_mass_g IS NOT NULL)", name="trial_mass_iff_trial"
        ),
        CheckConstraint(
            "trial_mass_g IS NULL OR (trial_plane IS NOT NULL AND trial_angle_deg IS NOT NULL "
            "AND trial_radius_mm IS NOT NULL)",
            name="trial_complete",
        ),
        # A struck-out run says when, by whom and why, or none of it.
        CheckConstraint(
            "(struck_at IS NULL AND struck_by_id IS NULL AND struck_reason IS NULL) OR "
            "(struck_at IS NOT NULL AND struck_by_id IS NOT NULL AND struck_reason <> '')",
            name="struck_complete",
        ),
    )

    id: Mapped[IntPK]
    job_id: Mapped[int] = mapped_column(
        ForeignKey("job.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    seq: Mapped[int] = mapped_column(Integer, nullable=False)
    purpose: Mapped[str] = mapped_column(String(16), nullable=False, index=True)
    speed_rpm: Mapped[float] = mapped_column(Float, nullable=False)
    trial_plane: Mapped[int | None] = mapped_column(Integer)
    trial_mass_g: Mapped[float | None] = mapped_column(Float)
    trial_angle_deg: Mapped[float | None] = mapped_column(Float)
    trial_radius_mm: Mapped[float | None] = mapped_column(Float)
    # True when an earlier trial mass was still on the rotor during this run.
    earlier_trial_left_on: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False)
    # Stored verdict of a check/final run: True when within tolerance in every plane,
    # False when not, NULL when not judged (other purposes, or readings unusable).
    # Set by the jobs service when the run is recorded; the shop measures (first-pass
    # rate) read it in SQL.
    within_tolerance: Mapped[bool | None] = mapped_column(Boolean)
    notes: Mapped[str] = mapped_column(Text, nullable=False, default="")
    by_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), index=True
    )
    taken_at: Mapped[Timestamp] = mapped_column(index=True)
    # Struck out: a mistaken run stays in the log (never deleted) but counts for nothing.
    struck_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime())
    # No ON DELETE clause (NO ACTION refuses the delete all the same): SQLite adds the
    # column with an inline REFERENCES, whose options SQLAlchemy cannot reflect.
    struck_by_id: Mapped[int | None] = mapped_column(ForeignKey("user_account.id"), index=True)
    struck_reason: Mapped[str | None] = mapped_column(Text)

    job: Mapped[Job] = relationship(back_populates="run_log")
    struck_by: Mapped[Any] = relationship("User", foreign_keys=[struck_by_id])
    readings: Mapped[list[RunReading]] = relationship(
        back_populates="run", order_by="RunReading.plane", cascade="all, delete-orphan"
    )


class RunReading(Base):
    """The machine's reading for one plane (sensor) in one run."""

    __tablename__ = "run_reading"
    __table_args__ = (
        UniqueConstraint("run_id", "plane"),
        one_of("unit", READING_UNITS),
        CheckConstraint("plane IN (1, 2)", name="plane_allowed"),
        CheckConstraint("amplitude >= 0", name="amplitude_nonneg"),
        angle_range("angle_deg"),
    )

    id: Mapped[IntPK]
    run_id: Mapped[int] = mapped_column(
        ForeignKey("run.id", ondelete="CASCADE"), nullable=False, index=True
    )
    plane: Mapped[int] = mapped_column(Integer, nullable=False)
    amplitude: Mapped[float] = mapped_column(Float, nullable=False)
    angle_deg: Mapped[float] = mapped_column(Float, nullable=False)
    unit: Mapped[str] = mapped_column(String(8), nullable=False, default="g·mm")

    run: Mapped[Run] = relationship(back_populates="readings")


class Correction(Base):
    """Mass actually added or removed in one plane (may differ from the advice)."""

    __tablename__ = "correction"
    __table_args__ = (
        one_of("action", CORRECTION_ACTIONS),
        CheckConstraint("plane IN (1, 2)", name="plane_allowed"),
        positive("mass_g", nullable=False),
        positive("radius_mm", nullable=False),
        positive("drill_depth_mm"),
        positive("drill_diameter_mm"),
        angle_range("angle_deg"),
        angle_range("advised_angle_deg"),
        # A struck-out correction says when, by whom and why, or none of it (as a run).
        CheckConstraint(
            "(struck_at IS NULL AND struck_by_id IS NULL AND struck_reason IS NULL) OR "
            "(struck_at IS NOT NULL AND struck_by_id IS NOT NULL AND struck_reason <> '')",
            name="struck_complete",
        ),
    )

    id: Mapped[IntPK]
    job_id: Mapped[int] = mapped_column(
        ForeignKey("job.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    run_id: Mapped[int | None] = mapped_column(
        ForeignKey("run.id", ondelete="RESTRICT"), index=True
    )
    plane: Mapped[int] = mapped_column(Integer, nullable=False)
    action: Mapped[str] = mapped_column(String(8), nullable=False, default="add")
    mass_g: Mapped[float] = mapped_column(Float, nullable=False)
    angle_deg: Mapped[float] = mapped_column(Float, nullable=False)
    radius_mm: Mapped[float] = mapped_column(Float, nullable=False)
    advised_mass_g: Mapped[float | None] = mapped_column(Float)
    advised_angle_deg: Mapped[float | None] = mapped_column(Float)
    # [{"position": 3, "angle_deg": 90.0, "mass_g": 4.2}, ...] when split onto fixed positions.
    split: Mapped[list[dict[str, Any]] | None] = mapped_column(JSON)
    drill_diameter_mm: Mapped[float | None] = mapped_column(Float)
    drill_depth_mm: Mapped[float | None] = mapped_column(Float)
    drill_holes: Mapped[int | None] = mapped_column(Integer)
    # An added weight fitted in place of an earlier one of the job, which was taken off.
    replaces_correction_id: Mapped[int | None] = mapped_column(
        ForeignKey("correction.id", ondelete="RESTRICT"), index=True
    )
    applied_by_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), index=True
    )
    applied_at: Mapped[Timestamp] = mapped_column(index=True)
    # Struck out: a correction recorded by mistake stays listed but counts for nothing.
    # No ON DELETE clause, for the reason given at Run.struck_by_id.
    struck_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime())
    struck_by_id: Mapped[int | None] = mapped_column(ForeignKey("user_account.id"), index=True)
    struck_reason: Mapped[str | None] = mapped_column(Text)

    job: Mapped[Job] = relationship(back_populates="correction_log")
    struck_by: Mapped[Any] = relationship("User", foreign_keys=[struck_by_id])


class InfluenceSet(Base):
    """Influence coefficients learned from a job, for reuse on the same rotor type.

    ``coefficients`` is a row-major list of ``[re, im]`` pairs of the matrix A in
    reading-units per gram at ``radius_mm`` of each plane (``V = V0 + A·W``).
    """

    __tablename__ = "influence_set"
    __table_args__ = (
        positive("speed_rpm", nullable=False),
        CheckConstraint("planes IN (1, 2)", name="planes_allowed"),
        one_of("reading_unit", READING_UNITS),
        Index("ix_influence_set_lookup", "rotor_type_id", "machine_id", "speed_rpm"),
    )

    id: Mapped[IntPK]
    rotor_type_id: Mapped[int] = mapped_column(
        ForeignKey("rotor_type.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    machine_id: Mapped[int] = mapped_column(
        ForeignKey("machine.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    speed_rpm: Mapped[float] = mapped_column(Float, nullable=False)
    planes: Mapped[int] = mapped_column(Integer, nullable=False)
    coefficients: Mapped[list[list[float]]] = mapped_column(JSON, nullable=False)
    reading_unit: Mapped[str] = mapped_column(String(8), nullable=False, default="g·mm")
    condition_number: Mapped[float | None] = mapped_column(Float)
    source_job_id: Mapped[int | None] = mapped_column(
        ForeignKey("job.id", ondelete="RESTRICT"), index=True
    )
    # How far the last job that used this set landed from its prediction, % of the initial.
    last_prediction_error_pct: Mapped[float | None] = mapped_column(Float)
    last_used_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime())
    learned_at: Mapped[Timestamp]
