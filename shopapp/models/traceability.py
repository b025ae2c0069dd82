"""Traceability: proving rotors, shop arbors and their errors, residual tests, balance errors."""

from __future__ import annotations

import datetime as dt
from typing import Any

from sqlalchemy import (
    JSON,
    Boolean,
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
from shopapp.models.jobs import READING_UNITS, Job

RESIDUAL_TEST_POSITIONS = (6, 8, 12)


class ProvingRotor(Base):
    """A rotor the shop keeps for proving tests of its machines (ISO 21940-21 idea)."""

    __tablename__ = "proving_rotor"
    __table_args__ = (
        positive("mass_kg", nullable=False),
        positive("radius_1_mm", nullable=False),
        positive("radius_2_mm"),
        CheckConstraint("planes IN (1, 2)", name="planes_allowed"),
        CheckConstraint("(planes = 2) = (radius_2_mm IS NOT NULL)", name="radius_2_iff_two"),
        CheckConstraint("positions >= 4", name="positions_min"),
    )

    id: Mapped[IntPK]
    name: Mapped[str] = mapped_column(String(100), unique=True, nullable=False)
    mass_kg: Mapped[float] = mapped_column(Float, nullable=False)
    planes: Mapped[int] = mapped_column(Integer, nullable=False, default=2)
    radius_1_mm: Mapped[float] = mapped_column(Float, nullable=False)
    radius_2_mm: Mapped[float | None] = mapped_column(Float)
    # Equally spaced test-mass positions the shop's procedure uses (holes on the rotor).
    positions: Mapped[int] = mapped_column(Integer, nullable=False, default=8)
    notes: Mapped[str] = mapped_column(Text, nullable=False, default="")
    archived: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False, index=True)
    created_at: Mapped[Timestamp]


class Arbor(Base):
    """A shop arbor (mandrel) on which rotors without their own shaft are balanced."""

    __tablename__ = "arbor"
    __table_args__ = (positive("mass_kg"),)

    id: Mapped[IntPK]
    name: Mapped[str] = mapped_column(String(100), unique=True, nullable=False)
    description: Mapped[str] = mapped_column(String(200), nullable=False, default="")
    mass_kg: Mapped[float | None] = mapped_column(Float)
    notes: Mapped[str] = mapped_column(Text, nullable=False, default="")
    archived: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False, index=True)
    created_at: Mapped[Timestamp]

    measurements: Mapped[list[ArborErrorMeasurement]] = relationship(
        back_populates="arbor",
        order_by=lambda: (ArborErrorMeasurement.measured_on, ArborErrorMeasurement.id),
    )


class ArborErrorMeasurement(Base):
    """An arbor's error found by index balancing (arbor frame, g·mm per plane).

    ``readings`` keeps the two runs as entered: ``{"index_deg": 180, "second_frame":
    "arbor", "first": [[amp, angle], ...], "second": [[amp, angle], ...]}``.
    """

    __tablename__ = "arbor_error_measurement"
    __table_args__ = (
        CheckConstraint("planes IN (1, 2)", name="planes_allowed"),
        CheckConstraint("error_1_gmm >= 0", name="error_1_nonneg"),
        CheckConstraint("error_2_gmm IS NULL OR error_2_gmm >= 0", name="error_2_nonneg"),
        CheckConstraint("(planes = 2) = (error_2_gmm IS NOT NULL)", name="error_2_iff_two"),
        angle_range("error_1_angle_deg"),
        angle_range("error_2_angle_deg"),
        positive("rotor_mass_kg"),
    )

    id: Mapped[IntPK]
    arbor_id: Mapped[int] = mapped_column(
        ForeignKey("arbor.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    measured_on: Mapped[dt.date] = mapped_column(Date, nullable=False, index=True)
    planes: Mapped[int] = mapped_column(Integer, nullable=False)
    error_1_gmm: Mapped[float] = mapped_column(Float, nullable=False)
    error_1_angle_deg: Mapped[float] = mapped_column(Float, nullable=False)
    error_2_gmm: Mapped[float | None] = mapped_column(Float)
    error_2_angle_deg: Mapped[float | None] = mapped_column(Float)
    # Mass of the rotor it was measured with: the seat-eccentricity part scales with it.
    rotor_mass_kg: Mapped[float | None] = mapped_column(Float)
    readings: Mapped[dict[str, Any]] = mapped_column(JSON, nullable=False, default=dict)
    job_id: Mapped[int | None] = mapped_column(
        ForeignKey("job.id", ondelete="RESTRICT"), index=True
    )
    measured_by_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), index=True
    )
    notes: Mapped[str] = mapped_column(Text, nullable=False, default="")
    created_at: Mapped[Timestamp]

    arbor: Mapped[Arbor] = relationship(back_populates="measurements")
    job: Mapped[Job | None] = relationship()
    measured_by: Mapped[Any] = relationship("User")


class ArborErrorSubtraction(Base):
    """The known arbor error a job subtracts from its readings (at most one per job)."""

    __tablename__ = "arbor_error_subtraction"
    __table_args__ = (UniqueConstraint("job_id"),)

    id: Mapped[IntPK]
    job_id: Mapped[int] = mapped_column(
        ForeignKey("job.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    measurement_id: Mapped[int] = mapped_column(
        ForeignKey("arbor_error_measurement.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    by_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), index=True
    )
    at: Mapped[Timestamp]

    job: Mapped[Job] = relationship()
    measurement: Mapped[ArborErrorMeasurement] = relationship()


class ResidualTest(Base):
    """A residual-unbalance verification test of one plane of a job.

    ``readings``: ``[{"position_deg": 0.0, "amplitude": 1.2, "angle_deg": 35.0 | None}, ...]``;
    ``repeat``: the reading with the test mass back at position 1. An invalid test
    keeps its readings and says why in ``invalid_reason``; only the latest test of a
    plane counts.
    """

    __tablename__ = "residual_test"
    __table_args__ = (
        CheckConstraint("plane IN (1, 2)", name="plane_allowed"),
        CheckConstraint("positions >= 4", name="positions_min"),
        positive("test_mass_g", nullable=False),
        positive("test_radius_mm", nullable=False),
        positive("test_unbalance_gmm", nullable=False),
        positive("permissible_gmm"),
        CheckConstraint("residual_gmm IS NULL OR residual_gmm >= 0", name="residual_nonneg"),
        CheckConstraint("NOT valid OR residual_gmm IS NOT NULL", name="valid_has_result"),
        CheckConstraint("valid OR invalid_reason <> ''", name="invalid_has_reason"),
        one_of("unit", READING_UNITS),
        angle_range("residual_angle_deg"),
    )

    id: Mapped[IntPK]
    job_id: Mapped[int] = mapped_column(
        ForeignKey("job.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    plane: Mapped[int] = mapped_column(Integer, nullable=False)
    test_mass_g: Mapped[float] = mapped_column(Float, nullable=False)
    test_radius_mm: Mapped[float] = mapped_column(Float, nullable=False)
    test_unbalance_gmm: Mapped[float] = mapped_column(Float, nullable=False)
    positions: Mapped[int] = mapped_column(Integer, nullable=False)
    unit: Mapped[str] = mapped_column(String(8), nullable=False, default="g·mm")
    readings: Mapped[list[dict[str, Any]]] = mapped_column(JSON, nullable=False)
    repeat: Mapped[dict[str, Any] | None] = mapped_column(JSON)
    method: Mapped[str | None] = mapped_column(String(10))
    residual_gmm: Mapped[float | None] = mapped_column(Float)
    residual_angle_deg: Mapped[float | None] = mapped_column(Float)
    fit_rms_relative: Mapped[float | None] = mapped_column(Float)
    circle_radius: Mapped[float | None] = mapped_column(Float)
    permissible_gmm: Mapped[float | None] = mapped_column(Float)
    within_tolerance: Mapped[bool | None] = mapped_column(Boolean)
    valid: Mapped[bool] = mapped_column(Boolean, nullable=False)
    invalid_reason: Mapped[str] = mapped_column(Text, nullable=False, default="")
    warnings: Mapped[list[str]] = mapped_column(JSON, nullable=False, default=list)
    performed_by_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), index=True
    )
    performed_at: Mapped[Timestamp] = mapped_column(index=True)

    job: Mapped[Job] = relationship()
    performed_by: Mapped[Any] = relationship("User")


class BalanceErrorEstimate(Base):
    """Repeated check runs without touching the rotor, and the ΔU per plane they give.

    ``readings``: one entry per run, ``[[amp, angle_deg], ...]`` per plane, g·mm;
    ``systematic``: ``{"1": {"arbor": 4.2, "key": 1.1}, "2": {...}}`` g·mm.
    """

    __tablename__ = "balance_error_estimate"
    __table_args__ = (
        CheckConstraint("planes IN (1, 2)", name="planes_allowed"),
        CheckConstraint("runs >= 3", name="runs_min"),
        CheckConstraint("delta_u_1_gmm >= 0", name="delta_u_1_nonneg"),
        CheckConstraint("delta_u_2_gmm IS NULL OR delta_u_2_gmm >= 0", name="delta_u_2_nonneg"),
        CheckConstraint("(planes = 2) = (delta_u_2_gmm IS NOT NULL)", name="delta_u_2_iff_two"),
    )

    id: Mapped[IntPK]
    job_id: Mapped[int] = mapped_column(
        ForeignKey("job.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    planes: Mapped[int] = mapped_column(Integer, nullable=False)
    runs: Mapped[int] = mapped_column(Integer, nullable=False)
    readings: Mapped[list[list[list[float]]]] = mapped_column(JSON, nullable=False)
    random_1_gmm: Mapped[float] = mapped_column(Float, nullable=False)
    random_2_gmm: Mapped[float | None] = mapped_column(Float)
    systematic: Mapped[dict[str, dict[str, float]]] = mapped_column(
        JSON, nullable=False, default=dict
    )
    delta_u_1_gmm: Mapped[float] = mapped_column(Float, nullable=False)
    delta_u_2_gmm: Mapped[float | None] = mapped_column(Float)
    key_compensation_applied: Mapped[bool] = mapped_column(
        Boolean, nullable=False, default=False
    )
    notes: Mapped[str] = mapped_column(Text, nullable=False, default="")
    performed_by_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), index=True
    )
    performed_at: Mapped[Timestamp] = mapped_column(index=True)

    job: Mapped[Job] = relationship()
    performed_by: Mapped[Any] = relationship("User")
