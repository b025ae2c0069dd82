"""Customers, rotor types, rotors, balancing machines and their verification records."""

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

from shopapp.balancing.removal import DENSITIES, HOLE_DIRECTIONS
from shopapp.models.base import Base, IntPK, Name, Timestamp, one_of, positive

ROTOR_KINDS = ("fan", "pump_impeller", "motor_rotor", "spindle", "roll", "wheel", "other")
CORRECTION_METHODS = ("add", "remove", "both")
ROTATIONS = ("cw", "ccw")
BEARING_KINDS = ("hard", "soft")
KEY_CONVENTIONS = ("none", "half_key", "full_key")
# What a balancing machine reads: "g·mm" is calibrated unbalance per correction plane;
# µm (displacement), mm/s and in/s (velocity) and mil are vibration readings.
READING_UNITS = ("um", "mm/s", "g·mm", "mil", "in/s")
CALIBRATED_READING_UNIT = "g·mm"
ROTOR_MATERIALS = tuple(DENSITIES)  # materials with a handbook density (balancing.removal)


class Customer(Base):
    __tablename__ = "customer"

    id: Mapped[IntPK]
    name: Mapped[Name] = mapped_column(index=True)
    contact: Mapped[str] = mapped_column(String(200), nullable=False, default="")
    email: Mapped[str] = mapped_column(String(200), nullable=False, default="")
    phone: Mapped[str] = mapped_column(String(64), nullable=False, default="")
    address: Mapped[str] = mapped_column(Text, nullable=False, default="")
    notes: Mapped[str] = mapped_column(Text, nullable=False, default="")
    # Per-customer default for the residual-unbalance verification test on their jobs.
    requires_residual_test: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False)
    archived: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False, index=True)
    created_at: Mapped[Timestamp]

    rotor_types: Mapped[list[RotorType]] = relationship(back_populates="customer")
    rotors: Mapped[list[Rotor]] = relationship(back_populates="customer")

    def __repr__(self) -> str:
        return f"<Customer {self.name}>"


class RotorType(Base):
    """A customer's part number / drawing, with the geometry the calculations need.

    A one-off rotor gets its own rotor type with ``one_off`` set, so every rotor
    has exactly one geometry and no geometry columns are duplicated on Rotor.
    Axial positions are mm from a datum chosen by the shop.
    """

    __tablename__ = "rotor_type"
    __table_args__ = (
        UniqueConstraint("customer_id", "part_number"),
        one_of("kind", ROTOR_KINDS),
        one_of("rotation", ROTATIONS),
        one_of("method_1", CORRECTION_METHODS),
        CheckConstraint(
            "method_2 IS NULL OR method_2 IN ('add', 'remove', 'both')", name="method_2_allowed"
        ),
        one_of("key_convention", KEY_CONVENTIONS),
        positive("mass_kg", nullable=False),
        positive("service_speed_rpm", nullable=False),
        positive("radius_1_mm", nullable=False),
        positive("radius_2_mm"),
        positive("density_g_cm3"),
        positive("first_critical_rpm"),
        positive("permitted_balancing_speed_rpm"),
        positive("tolerance_grade"),
        positive("tolerance_gmm"),
        CheckConstraint("bearing_a_mm <> bearing_b_mm", name="bearings_apart"),
        CheckConstraint("positions_1 IS NULL OR positions_1 >= 2", name="positions_1_min"),
        CheckConstraint("positions_2 IS NULL OR positions_2 >= 2", name="positions_2_min"),
        CheckConstraint(
            "(plane_2_mm IS NULL) = (radius_2_mm IS NULL)", name="plane_2_complete"
        ),
        # Key size for the key-convention compensation (traceability).
        positive("key_width_mm"),
        positive("key_height_mm"),
        positive("key_length_mm"),
        positive("hub_length_mm"),
        positive("key_radius_mm"),
        CheckConstraint(
            "key_angle_deg IS NULL OR (key_angle_deg >= 0 AND key_angle_deg < 360)",
            name="key_angle_range",
        ),
        # Corrections (issue 11): stock weights, material, drilling limits.
        one_of("material", ROTOR_MATERIALS),
        one_of("hole_direction", HOLE_DIRECTIONS),
        positive("max_hole_depth_mm"),
        positive("drill_section_mm"),
        CheckConstraint("min_wall_mm IS NULL OR min_wall_mm >= 0", name="min_wall_mm_range"),
    )

    id: Mapped[IntPK]
    customer_id: Mapped[int] = mapped_column(
        ForeignKey("customer.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    part_number: Mapped[str] = mapped_column(String(100), nullable=False, index=True)
    description: Mapped[str] = mapped_column(String(200), nullable=False, default="")
    kind: Mapped[str] = mapped_column(String(20), nullable=False, default="other", index=True)
    one_off: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False)
    mass_kg: Mapped[float] = mapped_column(Float, nullable=False)
    service_speed_rpm: Mapped[float] = mapped_column(Float, nullable=False)
    first_critical_rpm: Mapped[float | None] = mapped_column(Float)
    # The highest speed the rotor may be spun at on a balancing machine; NULL = its
    # service speed (see :attr:`permitted_speed_rpm`).
    permitted_balancing_speed_rpm: Mapped[float | None] = mapped_column(Float)
    bearing_a_mm: Mapped[float] = mapped_column(Float, nullable=False)
    bearing_b_mm: Mapped[float] = mapped_column(Float, nullable=False)
    centre_of_mass_mm: Mapped[float] = mapped_column(Float, nullable=False)
    plane_1_mm: Mapped[float] = mapped_column(Float, nullable=False)
    plane_2_mm: Mapped[float | None] = mapped_column(Float)
    radius_1_mm: Mapped[float] = mapped_column(Float, nullable=False)
    radius_2_mm: Mapped[float | None] = mapped_column(Float)
    method_1: Mapped[str] = mapped_column(String(8), nullable=False, default="add")
    method_2: Mapped[str | None] = mapped_column(String(8))
    positions_1: Mapped[int | None] = mapped_column(Integer)
    positions_2: Mapped[int | None] = mapped_column(Integer)
    first_position_1_deg: Mapped[float] = mapped_column(Float, nullable=False, default=0.0)
    first_position_2_deg: Mapped[float] = mapped_column(Float, nullable=False, default=0.0)
    density_g_cm3: Mapped[float | None] = mapped_column(Float)
    tolerance_grade: Mapped[float | None] = mapped_column(Float)
    tolerance_gmm: Mapped[float | None] = mapped_column(Float)
    rotation: Mapped[str] = mapped_column(String(4), nullable=False, default="cw")
    key_convention: Mapped[str] = mapped_column(String(10), nullable=False, default="none")
    # Keyway and key (all optional; needed for the half-key compensation), mm / degrees.
    key_width_mm: Mapped[float | None] = mapped_column(Float)
    key_height_mm: Mapped[float | None] = mapped_column(Float)
    key_length_mm: Mapped[float | None] = mapped_column(Float)
    hub_length_mm: Mapped[float | None] = mapped_column(Float)
    key_radius_mm: Mapped[float | None] = mapped_column(Float)
    key_angle_deg: Mapped[float | None] = mapped_column(Float)
    # Corrections (issue 11), all optional: the shop's stock weights for this rotor (grams),
    # the material (its handbook density when density_g_cm3 is empty), and the drilling
    # limits from the drawing: radial or axial holes, deepest hole to the tip, least wall
    # left (under the tip and between holes) and the material depth the holes go into.
    stock_weights_g: Mapped[list[float] | None] = mapped_column(JSON)
    material: Mapped[str | None] = mapped_column(String(20))
    hole_direction: Mapped[str | None] = mapped_column(String(6))
    max_hole_depth_mm: Mapped[float | None] = mapped_column(Float)
    min_wall_mm: Mapped[float | None] = mapped_column(Float)
    drill_section_mm: Mapped[float | None] = mapped_column(Float)
    notes: Mapped[str] = mapped_column(Text, nullable=False, default="")
    archived: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False, index=True)
    created_at: Mapped[Timestamp]

    customer: Mapped[Customer] = relationship(back_populates="rotor_types")
    rotors: Mapped[list[Rotor]] = relationship(back_populates="rotor_type")

    @property
    def planes(self) -> int:
        """1 for single-plane rotors, 2 for two-plane rotors."""
        return 1 if self.plane_2_mm is None else 2

    @property
    def permitted_speed_rpm(self) -> float:
        """The permitted balancing speed, or the service speed when none is given."""
        if self.permitted_balancing_speed_rpm is not None:
            return self.permitted_balancing_speed_rpm
        return self.service_speed_rpm


class Rotor(Base):
    __tablename__ = "rotor"
    __table_args__ = (UniqueConstraint("customer_id", "serial_number"),)

    id: Mapped[IntPK]
    customer_id: Mapped[int] = mapped_column(
        ForeignKey("customer.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    rotor_type_id: Mapped[int] = mapped_column(
        ForeignKey("rotor_type.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    serial_number: Mapped[str] = mapped_column(String(100), nullable=False, index=True)
    notes: Mapped[str] = mapped_column(Text, nullable=False, default="")
    archived: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False, index=True)
    created_at: Mapped[Timestamp]

    customer: Mapped[Customer] = relationship(back_populates="rotors")
    rotor_type: Mapped[RotorType] = relationship(back_populates="rotors")


class Machine(Base):
    """One of the shop's balancing machines."""

    __tablename__ = "machine"
    __table_args__ = (
        one_of("bearing_kind", BEARING_KINDS),
        positive("max_mass_kg", nullable=False),
        positive("max_speed_rpm", nullable=False),
        positive("claimed_emar_gmm_per_kg"),
        positive("suspension_resonance_rpm"),
        CheckConstraint("min_mass_kg >= 0 AND min_mass_kg < max_mass_kg", name="mass_range"),
        CheckConstraint("min_speed_rpm >= 0 AND min_speed_rpm < max_speed_rpm", name="speed_range"),
        CheckConstraint("verification_interval_days > 0", name="interval_positive"),
        one_of("reading_unit", READING_UNITS),
        CheckConstraint("reading_planes IN (1, 2)", name="reading_planes_allowed"),
        CheckConstraint(
            "claimed_urr_pct IS NULL OR (claimed_urr_pct > 0 AND claimed_urr_pct <= 100)",
            name="claimed_urr_range",
        ),
    )

    id: Mapped[IntPK]
    name: Mapped[str] = mapped_column(String(100), unique=True, nullable=False)
    bearing_kind: Mapped[str] = mapped_column(String(4), nullable=False)
    min_mass_kg: Mapped[float] = mapped_column(Float, nullable=False, default=0.0)
    max_mass_kg: Mapped[float] = mapped_column(Float, nullable=False)
    min_speed_rpm: Mapped[float] = mapped_column(Float, nullable=False, default=0.0)
    max_speed_rpm: Mapped[float] = mapped_column(Float, nullable=False)
    # Minimum achievable residual specific unbalance the maker claims, g·mm/kg (= µm).
    claimed_emar_gmm_per_kg: Mapped[float | None] = mapped_column(Float)
    claimed_urr_pct: Mapped[float | None] = mapped_column(Float)
    suspension_resonance_rpm: Mapped[float | None] = mapped_column(Float)
    # What the machine's readings are: "g·mm" for a calibrated machine (unbalance per
    # correction plane), else a vibration unit that needs influence coefficients.
    reading_unit: Mapped[str] = mapped_column(String(8), nullable=False)
    # How many planes (sensors) the machine reads in one run.
    reading_planes: Mapped[int] = mapped_column(Integer, nullable=False, default=2)
    verification_interval_days: Mapped[int] = mapped_column(Integer, nullable=False, default=365)
    notes: Mapped[str] = mapped_column(Text, nullable=False, default="")
    archived: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False, index=True)
    created_at: Mapped[Timestamp]

    verifications: Mapped[list[MachineVerification]] = relationship(
        back_populates="machine", order_by="MachineVerification.performed_on"
    )


class MachineVerification(Base):
    """A proving-rotor test of a machine (ISO 21940-21 idea)."""

    __tablename__ = "machine_verification"
    __table_args__ = (
        positive("proving_rotor_mass_kg"),
        CheckConstraint("measured_umar_gmm IS NULL OR measured_umar_gmm >= 0", name="umar_nonneg"),
        CheckConstraint("urr_pct IS NULL OR urr_pct <= 100", name="urr_max"),
    )

    id: Mapped[IntPK]
    machine_id: Mapped[int] = mapped_column(
        ForeignKey("machine.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    performed_on: Mapped[dt.date] = mapped_column(Date, nullable=False, index=True)
    proving_rotor: Mapped[str] = mapped_column(String(200), nullable=False)
    proving_rotor_mass_kg: Mapped[float | None] = mapped_column(Float)
    measured_umar_gmm: Mapped[float | None] = mapped_column(Float)
    urr_pct: Mapped[float | None] = mapped_column(Float)
    passed: Mapped[bool] = mapped_column(Boolean, nullable=False)
    # The proving rotor and the machine's claims at the time of the test (traceability).
    proving_rotor_id: Mapped[int | None] = mapped_column(
        ForeignKey("proving_rotor.id", ondelete="RESTRICT"), index=True
    )
    claimed_umar_gmm: Mapped[float | None] = mapped_column(Float)
    claimed_urr_pct: Mapped[float | None] = mapped_column(Float)
    readings: Mapped[dict[str, Any]] = mapped_column(JSON, nullable=False, default=dict)
    performed_by_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), index=True
    )
    notes: Mapped[str] = mapped_column(Text, nullable=False, default="")
    created_at: Mapped[Timestamp]

    machine: Mapped[Machine] = relationship(back_populates="verifications")
