"""Read-only selects of the certificates area (pages, panels, the use-cases' look-ups).

Nothing here writes, checks a role or raises a refusal; the use-cases of
:mod:`shopapp.certificates.issue` and :mod:`shopapp.certificates.register` build on them.
"""

from __future__ import annotations

from sqlalchemy import func, select
from sqlalchemy.orm import Session, defer, joinedload

from shopapp.core.errors import NotFound
from shopapp.models import Certificate, Job, Rotor

CERTIFIABLE_STATES = ("in_tolerance",)


def revisions(session: Session, number: str) -> list[Certificate]:
    """All revisions of a certificate number, oldest first (PDF bytes not loaded)."""
    return list(session.scalars(
        select(Certificate).where(Certificate.number == number)
        .options(defer(Certificate.pdf), defer(Certificate.data_json))
        .order_by(Certificate.revision)
    ))


def latest_revision(session: Session, number: str) -> int | None:
    """The highest revision of a certificate number (None when there is none)."""
    return session.scalar(
        select(func.max(Certificate.revision)).where(Certificate.number == number)
    )


def job_certificates(session: Session, job: Job) -> list[Certificate]:
    """The job's certificates, newest revision first (PDF bytes not loaded)."""
    return list(session.scalars(
        select(Certificate).where(Certificate.job_id == job.id)
        .options(defer(Certificate.pdf), defer(Certificate.data_json))
        .order_by(Certificate.revision.desc())
    ))


def by_number(session: Session, number: str, revision: int | None = None) -> Certificate:
    """A revision of a certificate (the latest when ``revision`` is None)."""
    stmt = select(Certificate).where(Certificate.number == number.strip().upper())
    if revision is not None:
        stmt = stmt.where(Certificate.revision == revision)
    cert = session.scalars(stmt.order_by(Certificate.revision.desc()).limit(1)).first()
    if cert is None:
        which = f"{number} revision {revision}" if revision is not None else number
        raise NotFound(f"no certificate {which}")
    return cert


def code_taken(session: Session, code: str) -> bool:
    """Whether a revision already has this verification code."""
    return session.scalar(
        select(func.count()).select_from(Certificate)
        .where(Certificate.verification_code == code)
    ) != 0


def by_number_and_code(session: Session, number: str, code: str) -> Certificate | None:
    """The revision of ``number`` whose verification code is ``code`` (PDF bytes not loaded)."""
    return session.scalars(
        select(Certificate)
        .where(Certificate.number == number, Certificate.verification_code == code)
        .options(defer(Certificate.pdf)).limit(1)
    ).first()


def by_number_and_hash_prefix(session: Session, number: str, prefix: str
                              ) -> Certificate | None:
    """The revision of ``number`` whose content or PDF hash starts with ``prefix``
    (lower-case hex; the footer of older certificates prints the first 16 digits)."""
    pattern = prefix + "%"
    return session.scalars(
        select(Certificate)
        .where(Certificate.number == number,
               Certificate.data_sha256.like(pattern) | Certificate.pdf_sha256.like(pattern))
        .options(defer(Certificate.pdf)).order_by(Certificate.revision.desc()).limit(1)
    ).first()


def number_exists(session: Session, number: str) -> bool:
    """Whether any revision has this number."""
    return session.scalar(
        select(func.count()).select_from(Certificate).where(Certificate.number == number)
    ) != 0


def certification_queue(session: Session, *, limit: int = 10) -> tuple[list[Job], int]:
    """Jobs in tolerance waiting for a certificate (oldest first) and how many there are."""
    waiting = Job.state.in_(CERTIFIABLE_STATES)
    total = session.scalar(select(func.count()).select_from(Job).where(waiting)) or 0
    jobs = list(session.scalars(
        select(Job).where(waiting)
        .options(joinedload(Job.customer), joinedload(Job.rotor).joinedload(Rotor.rotor_type))
        .order_by(Job.first_in_tolerance_at.asc().nulls_last(), Job.id).limit(limit)
    ))
    return jobs, total
