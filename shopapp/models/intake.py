"""Rows of the machine-readings intake (issue 14 part 2).

- :class:`MachineMapping`: how one machine's export file reads — delimiter, decimal
  mark, header rows to skip, encoding, the machine's angle convention (sense and zero)
  and which of its columns hold which of our fields. One per machine, saved by quality.
- :class:`ImportedFile`: every file whose runs were imported, by the SHA-256 of its
  bytes (unique), so the same file is never imported twice — through the page, the
  ``shopapp intake file`` command or the watched folder alike.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import JSON, CheckConstraint, Float, ForeignKey, Integer, String, Text
from sqlalchemy.orm import Mapped, mapped_column, relationship

from shopapp.models.base import Base, IntPK, Timestamp, angle_range, one_of
from shopapp.models.people import ANGLE_SENSES
from shopapp.models.registry import READING_UNITS, Machine

DELIMITERS = (";", ",")
DECIMAL_MARKS = (".", ",")
ENCODINGS = ("utf-8", "cp1252")
SPEED_UNITS = ("rpm", "Hz")
IMPORT_SOURCES = ("upload", "file", "watch")


class MachineMapping(Base):
    """How a machine's export file maps onto shopapp's run fields (one per machine)."""

    __tablename__ = "machine_mapping"
    __table_args__ = (
        one_of("delimiter", DELIMITERS),
        one_of("decimal_mark", DECIMAL_MARKS),
        one_of("encoding", ENCODINGS),
        one_of("angle_sense", ANGLE_SENSES),
        one_of("speed_unit", SPEED_UNITS),
        angle_range("angle_zero_deg"),
        CheckConstraint("skip_rows >= 0 AND skip_rows <= 50", name="skip_rows_range"),
        CheckConstraint(
            "reading_unit IS NULL OR reading_unit IN ("
            + ", ".join(f"'{u}'" for u in READING_UNITS) + ")",
            name="reading_unit_allowed",
        ),
    )

    id: Mapped[IntPK]
    machine_id: Mapped[int] = mapped_column(ForeignKey("machine.id", ondelete="RESTRICT"),
                                            nullable=False, unique=True)
    delimiter: Mapped[str] = mapped_column(String(1), nullable=False)
    decimal_mark: Mapped[str] = mapped_column(String(1), nullable=False)
    # Lines before the header line (a machine's title, date, operator lines).
    skip_rows: Mapped[int] = mapped_column(Integer, nullable=False, default=0)
    encoding: Mapped[str] = mapped_column(String(16), nullable=False, default="utf-8")
    # The machine's angle convention: converted to shopapp's at the edge.
    angle_sense: Mapped[str] = mapped_column(String(20), nullable=False)
    angle_zero_deg: Mapped[float] = mapped_column(Float, nullable=False, default=0.0)
    speed_unit: Mapped[str] = mapped_column(String(4), nullable=False, default="rpm")
    # The unit of every amplitude when the export has no unit column.
    reading_unit: Mapped[str | None] = mapped_column(String(8))
    # Our field name → the export's header text ({"amplitude_1": "Amp L", ...}).
    columns: Mapped[dict[str, Any]] = mapped_column(JSON, nullable=False)
    updated_at: Mapped[Timestamp]
    updated_by_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="SET NULL"), index=True)

    machine: Mapped[Machine] = relationship()


class ImportedFile(Base):
    """A file whose runs were imported; its content hash is never imported again."""

    __tablename__ = "imported_file"
    __table_args__ = (one_of("source", IMPORT_SOURCES),)

    id: Mapped[IntPK]
    sha256: Mapped[str] = mapped_column(String(64), nullable=False, unique=True)
    file_name: Mapped[str] = mapped_column(String(255), nullable=False)
    machine_id: Mapped[int | None] = mapped_column(
        ForeignKey("machine.id", ondelete="RESTRICT"), index=True)
    source: Mapped[str] = mapped_column(String(8), nullable=False)
    imported_at: Mapped[Timestamp]
    by_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), index=True)
    # What was written, in words ("3 runs: T-000012 runs 4-6").
    outcome: Mapped[str] = mapped_column(Text, nullable=False)

    def __repr__(self) -> str:
        return f"<ImportedFile {self.file_name} {self.sha256[:12]}>"



