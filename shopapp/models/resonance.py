"""Run-up (or coast-down) records: readings of one sensor against speed through a resonance.

A record belongs to a job, to a machine, or to both (a job's run-up is made on a
machine). Angles are stored internally (degrees in the direction of rotation
from the reference mark, 0 ≤ angle < 360); the use-cases convert from the shop's
display convention (docs/architecture.md, "Conventions").

The readings are a child table, one row per reading, rather than a JSON column:
the database itself then refuses a speed ≤ 0, a negative amplitude or an angle
outside [0, 360), like every other reading in the schema.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from sqlalchemy import (
    CheckConstraint,
    Date,
    Float,
    ForeignKey,
    Integer,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import Mapped, mapped_column, relationship

from shopapp.models.base import Base, IntPK, Timestamp, angle_range, one_of, positive
from shopapp.models.jobs import Job
from shopapp.models.registry import Machine

# Measured quantity → the units a reading of it may be typed in (first = default).
RUNUP_UNITS: dict[str, tuple[str, ...]] = {
    "displacement": ("µm", "mils"),
    "velocity": ("mm/s", "in/s"),
    "acceleration": ("m/s²", "g"),
}
MEASURED_QUANTITIES: tuple[str, ...] = tuple(RUNUP_UNITS)
ALL_RUNUP_UNITS: tuple[str, ...] = tuple(u for units in RUNUP_UNITS.values() for u in units)
SWEEPS: tuple[str, ...] = ("run_up", "coast_down")


class RunUpRecord(Base):
    """One run-up or coast-down of one sensor (plane, bearing, direction)."""

    __tablename__ = "run_up"
    __table_args__ = (
        one_of("measured", MEASURED_QUANTITIES),
        one_of("unit", ALL_RUNUP_UNITS),
        one_of("sweep", SWEEPS),
        CheckConstraint("job_id IS NOT NULL OR machine_id IS NOT NULL", name="belongs"),
        CheckConstraint(
            "slow_roll_amplitude IS NULL OR slow_roll_amplitude >= 0", name="slow_roll_nonneg"
        ),
        CheckConstraint(
            "(slow_roll_amplitude IS NULL) = (slow_roll_angle_deg IS NULL)",
            name="slow_roll_pair",
        ),
        angle_range("slow_roll_angle_deg"),
        positive("operating_speed_rpm"),
        positive("operating_lo_rpm"),
        positive("operating_hi_rpm"),
        CheckConstraint(
            "(operating_lo_rpm IS NULL) = (operating_hi_rpm IS NULL)", name="range_pair"
        ),
        CheckConstraint(
            "operating_lo_rpm IS NULL OR operating_lo_rpm < operating_hi_rpm",
            name="range_order",
        ),
        CheckConstraint(
            "operating_speed_rpm IS NULL OR operating_lo_rpm IS NULL", name="speed_or_range"
        ),
    )

    id: Mapped[IntPK]
    job_id: Mapped[int | None] = mapped_column(
        ForeignKey("job.id", ondelete="RESTRICT"), index=True
    )
    machine_id: Mapped[int | None] = mapped_column(
        ForeignKey("machine.id", ondelete="RESTRICT"), index=True
    )
    recorded_on: Mapped[dt.date] = mapped_column(Date, nullable=False, index=True)
    sensor: Mapped[str] = mapped_column(String(64), nullable=False)
    measured: Mapped[str] = mapped_column(String(12), nullable=False)
    unit: Mapped[str] = mapped_column(String(8), nullable=False)
    sweep: Mapped[str] = mapped_column(String(10), nullable=False)
    slow_roll_amplitude: Mapped[float | None] = mapped_column(Float)
    slow_roll_angle_deg: Mapped[float | None] = mapped_column(Float)
    operating_speed_rpm: Mapped[float | None] = mapped_column(Float)
    operating_lo_rpm: Mapped[float | None] = mapped_column(Float)
    operating_hi_rpm: Mapped[float | None] = mapped_column(Float)
    notes: Mapped[str] = mapped_column(Text, nullable=False, default="")
    by_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), index=True
    )
    created_at: Mapped[Timestamp]

    job: Mapped[Job | None] = relationship()
    machine: Mapped[Machine | None] = relationship()
    by: Mapped[Any] = relationship("User")
    points: Mapped[list[RunUpPoint]] = relationship(
        back_populates="record", order_by="RunUpPoint.seq", cascade="all, delete-orphan"
    )


class RunUpPoint(Base):
    """One reading of a run-up: speed, amplitude (the record's unit), internal angle."""

    __tablename__ = "run_up_point"
    __table_args__ = (
        UniqueConstraint("record_id", "seq"),
        CheckConstraint("seq >= 1", name="seq_positive"),
        positive("speed_rpm", nullable=False),
        CheckConstraint("amplitude >= 0", name="amplitude_nonneg"),
        CheckConstraint("angle_deg >= 0 AND angle_deg < 360", name="angle_deg_range"),
    )

    id: Mapped[IntPK]
    record_id: Mapped[int] = mapped_column(
        ForeignKey("run_up.id", ondelete="CASCADE"), nullable=False, index=True
    )
    seq: Mapped[int] = mapped_column(Integer, nullable=False)
    speed_rpm: Mapped[float] = mapped_column(Float, nullable=False)
    amplitude: Mapped[float] = mapped_column(Float, nullable=False)
    angle_deg: Mapped[float] = mapped_column(Float, nullable=False)

    record: Mapped[RunUpRecord] = relationship(back_populates="points")
