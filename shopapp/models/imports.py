"""What an import from spreadsheets leaves behind (issue 14, part 3).

- :class:`ImportBatch`: one applied file — its kind, name, SHA-256, who, when and the
  row counts — so "where did this customer or job come from?" has an answer.
- :class:`ImportedJob`: a past job brought over with only its final residual per
  plane and the verdict written in the old records (no runs exist for it). Its presence
  is what marks the job imported (``Job.imported``); the measures leave such jobs out
  (:mod:`shopapp.jobs.facts`).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from sqlalchemy import Boolean, CheckConstraint, Float, ForeignKey, Integer, String
from sqlalchemy.orm import Mapped, mapped_column, relationship

from shopapp.models.base import Base, IntPK, Timestamp, angle_range, one_of

if TYPE_CHECKING:
    from shopapp.models.jobs import Job

IMPORT_KINDS = ("customers", "rotor-types", "rotors", "jobs")


class ImportBatch(Base):
    """One file applied by ``shopapp import`` or the import page (dry runs leave none)."""

    __tablename__ = "import_batch"
    __table_args__ = (
        one_of("kind", IMPORT_KINDS),
        CheckConstraint("rows >= 0 AND created >= 0 AND updated >= 0 AND unchanged >= 0",
                        name="counts_nonneg"),
    )

    id: Mapped[IntPK]
    kind: Mapped[str] = mapped_column(String(16), nullable=False)
    file_name: Mapped[str] = mapped_column(String(255), nullable=False)
    file_sha256: Mapped[str] = mapped_column(String(64), nullable=False, index=True)
    by_id: Mapped[int] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    at: Mapped[Timestamp] = mapped_column(index=True)
    rows: Mapped[int] = mapped_column(Integer, nullable=False)
    created: Mapped[int] = mapped_column(Integer, nullable=False)
    updated: Mapped[int] = mapped_column(Integer, nullable=False)
    unchanged: Mapped[int] = mapped_column(Integer, nullable=False)


class ImportedJob(Base):
    """A past job's final residual per plane (g·mm) and the old verdict."""

    __tablename__ = "imported_job"
    __table_args__ = (
        CheckConstraint("residual_1_gmm >= 0", name="residual_1_gmm_nonneg"),
        CheckConstraint("residual_2_gmm IS NULL OR residual_2_gmm >= 0",
                        name="residual_2_gmm_nonneg"),
        angle_range("residual_1_angle_deg"),
        angle_range("residual_2_angle_deg"),
    )

    job_id: Mapped[int] = mapped_column(
        ForeignKey("job.id", ondelete="RESTRICT"), primary_key=True
    )
    batch_id: Mapped[int | None] = mapped_column(
        ForeignKey("import_batch.id", ondelete="RESTRICT"), index=True
    )
    # The file's row (1 = the first row under the header), to find the source again.
    source_row: Mapped[int | None] = mapped_column(Integer)
    residual_1_gmm: Mapped[float] = mapped_column(Float, nullable=False)
    residual_2_gmm: Mapped[float | None] = mapped_column(Float)
    residual_1_angle_deg: Mapped[float | None] = mapped_column(Float)
    residual_2_angle_deg: Mapped[float | None] = mapped_column(Float)
    # The verdict written in the old records (True: in tolerance), not judged again here.
    passed: Mapped[bool] = mapped_column(Boolean, nullable=False)

    # Set at creation, so the job and this row are inserted in one flush (one facts refresh).
    job: Mapped[Job] = relationship()
