"""Facts kept per job and per run so the shop measures read small rows, not history.

A :class:`JobFact` row (one per job) and the :class:`RunFact` rows (one per stored run)
are derived data: :mod:`shopapp.jobs.facts` computes them from the job, its rotor, runs,
readings, corrections and transitions (and its customer returns) in the same
transaction as every change to them, and ``shopapp measures rebuild`` recomputes all of
them from scratch. Nothing else writes them.
"""

from __future__ import annotations

import datetime as dt

from sqlalchemy import Date, Float, ForeignKey, Index, Integer, String, Text, text
from sqlalchemy.orm import Mapped, mapped_column

from shopapp.models.base import Base, UTCDateTime


class JobFact(Base):
    """One job's slice keys, dates and the values the measures count (see the columns)."""

    __tablename__ = "job_fact"
    __table_args__ = (
        # A rotor's visits newest first (rotors getting worse, drift).
        Index("ix_job_fact_rotor_received", "rotor_id", "received_on"),
        # Work in progress today: the few jobs neither dispatched nor rejected. A partial
        # index on both backends (SQLite >= 3.8 and PostgreSQL know WHERE on an index).
        Index("ix_job_fact_open", "received_on",
              sqlite_where=text("dispatched_on IS NULL AND rejected_at IS NULL"),
              postgresql_where=text("dispatched_on IS NULL AND rejected_at IS NULL")),
    )

    job_id: Mapped[int] = mapped_column(
        ForeignKey("job.id", ondelete="CASCADE"), primary_key=True
    )
    # Slice keys: the job's own, and its rotor's type.
    operator_id: Mapped[int | None] = mapped_column(Integer)
    machine_id: Mapped[int | None] = mapped_column(Integer)
    rotor_type_id: Mapped[int] = mapped_column(Integer, nullable=False)
    customer_id: Mapped[int] = mapped_column(Integer, nullable=False)
    rotor_id: Mapped[int] = mapped_column(Integer, nullable=False)
    kind: Mapped[str] = mapped_column(String(8), nullable=False)
    received_on: Mapped[dt.date] = mapped_column(Date, nullable=False, index=True)
    received_month: Mapped[str] = mapped_column(String(7), nullable=False)
    # Mondays-to-Fridays from 1969-12-29 up to the day of receipt (core.sqltime): a work
    # in progress's age on a day is that day's index minus this one.
    received_wd_index: Mapped[int] = mapped_column(Integer, nullable=False)
    dispatched_on: Mapped[dt.date | None] = mapped_column(Date, index=True)
    dispatched_month: Mapped[str | None] = mapped_column(String(7))
    # Working days after the day of receipt up to and including the day of dispatch.
    turnaround_wd: Mapped[int | None] = mapped_column(Integer)
    # 1 dispatched on or before the promised date, 0 after it, NULL without either date.
    promised_hit: Mapped[int | None] = mapped_column(Integer)
    # The first move to rejected (work in progress ends there).
    rejected_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime(), index=True)
    first_in_tolerance_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime(), index=True)
    tolerance_month: Mapped[str | None] = mapped_column(String(7))
    # Correction steps applied up to first reaching in_tolerance.
    correction_cycles: Mapped[int] = mapped_column(Integer, nullable=False)
    # 1/0: the first check or final run after the first step was within tolerance or not;
    # NULL: no step before tolerance, or that run carries no verdict.
    first_pass: Mapped[int | None] = mapped_column(Integer)
    # Rework: the first reopening from a finished state, the first customer return's day.
    first_reopen_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime())
    first_return_on: Mapped[dt.date | None] = mapped_column(Date)
    # The first initial run's readings: the largest amplitude of all planes and of each
    # plane, the smallest and largest unit (text order) and how many units.
    initial_amplitude: Mapped[float | None] = mapped_column(Float)
    initial_amplitude_1: Mapped[float | None] = mapped_column(Float)
    initial_amplitude_2: Mapped[float | None] = mapped_column(Float)
    initial_unit: Mapped[str | None] = mapped_column(String(8))
    initial_unit_max: Mapped[str | None] = mapped_column(String(8))
    initial_units: Mapped[int] = mapped_column(Integer, nullable=False)


class RunFact(Base):
    """One run that was not struck out, with the gap that ends at it (machine time).

    A job's runs are cut into segments at its reopenings; ``gap_s`` is the whole
    seconds since the run before it in the same segment (NULL for a segment's first
    run). The idle-time cap is applied when the measures add the gaps up, so a change
    of ``MACHINE_IDLE_MINUTES`` needs no rebuild. Definitions:
    :mod:`shopapp.measures.costs`.
    """

    __tablename__ = "run_fact"
    __table_args__ = (
        # A period's gaps: the runs taken in it, read from the index alone.
        Index("ix_run_fact_taken_at", "taken_at", "job_id", "gap_s", "rework", "reason"),
    )

    run_id: Mapped[int] = mapped_column(
        ForeignKey("run.id", ondelete="CASCADE"), primary_key=True
    )
    job_id: Mapped[int] = mapped_column(
        ForeignKey("job.id", ondelete="CASCADE"), nullable=False, index=True
    )
    taken_at: Mapped[dt.datetime] = mapped_column(UTCDateTime(), nullable=False)
    gap_s: Mapped[int | None] = mapped_column(Integer)
    # 1: after a reopening, or any run of a customer-return job; 0: first-time work.
    rework: Mapped[int] = mapped_column(Integer, nullable=False)
    # Why, for rework: the reopening's reason as listed, or the customer return's; '' else.
    reason: Mapped[str] = mapped_column(Text, nullable=False)
