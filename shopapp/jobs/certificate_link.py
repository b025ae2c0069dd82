"""What a job's state machine must know about its certificates.

Reopening a certified or dispatched job is rework: its valid certificate must be
voided in the same transaction, or ``/verify`` would keep calling it valid. The
jobs feature sits below the certificates feature (docs/architecture.md), so the
certificate row's one allowed change (issued → void) and the question "which
certificate of this job is valid" live here; ``shopapp.certificates`` imports
them for its own void and reissue.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session, defer

from shopapp.core import audit
from shopapp.core.clock import shop_date
from shopapp.core.errors import TransitionRefused
from shopapp.models import Certificate, Job, User, utcnow

#: How a certificate voided by reopening its job begins its void reason.
REOPENED_PREFIX = "job reopened: "


def superseded_reason(revision: int) -> str:
    """The void reason of a revision that a reissue replaced with ``revision``."""
    return f"superseded by revision {revision}"


def reissue_reason(prior: Certificate) -> str:
    """The printed reason of a job's next revision issued after ``prior`` (the latest,
    void) was voided: by reopening the job, or voided alone from the queue."""
    why = prior.void_reason
    if why.startswith(REOPENED_PREFIX):
        return (f"issued again after the job was reopened ({why.removeprefix(REOPENED_PREFIX)}); "
                f"revision {prior.revision} was voided")
    return f"issued again after revision {prior.revision} was voided: {why}"


def now_whole_seconds() -> dt.datetime:
    """Now in UTC, whole seconds: issue times are printed and hashed and must read back."""
    return utcnow().replace(microsecond=0)


def current_certificate(session: Session, job: Job) -> Certificate | None:
    """The job's issued (valid) certificate, if any."""
    return session.scalars(
        select(Certificate).where(Certificate.job_id == job.id, Certificate.state == "issued")
        .options(defer(Certificate.pdf), defer(Certificate.data_json))
        .order_by(Certificate.revision.desc()).limit(1)
    ).first()


def certificate_summary(cert: Certificate) -> dict[str, Any]:
    """The audit trail's picture of a certificate revision."""
    return {"number": cert.number, "revision": cert.revision, "state": cert.state,
            "pdf_sha256": cert.pdf_sha256, "data_sha256": cert.data_sha256,
            "reason": cert.reason, "void_reason": cert.void_reason}


def audit_certificate(session: Session, *, by: User | None, entity_id: int, action: str,
                      job_id: int | None, at: dt.datetime | None,
                      before: dict[str, Any] | None = None,
                      after: dict[str, Any] | None = None) -> None:
    """One audit event about a certificate; a historical record keeps its own time."""
    event = audit.record(session, by=by, entity="certificate", entity_id=entity_id,
                         action=action, before=before, after=after, job_id=job_id)
    if at is not None:
        event.at = at


def void_certificate(session: Session, cert: Certificate, *, by: User | None, reason: str,
                     at: dt.datetime | None = None) -> None:
    """Mark an issued certificate void (the only change the database allows on its row)."""
    if cert.state != "issued":
        when = shop_date(cert.voided_at).isoformat() if cert.voided_at else "earlier"
        raise TransitionRefused(
            f"{cert.number} revision {cert.revision} is already void (since {when})."
        )
    before = certificate_summary(cert)
    cert.state = "void"
    cert.voided_at = at or now_whole_seconds()
    cert.voided_by_id = by.id if by is not None else None
    cert.void_reason = reason
    session.flush()
    audit_certificate(session, by=by, entity_id=cert.id, action="void", before=before,
                      after=certificate_summary(cert), job_id=cert.job_id, at=at)


def void_for_reopen(session: Session, job: Job, *, by: User, reason: str) -> Certificate | None:
    """Void the job's valid certificate because the job is being reopened.

    Called by :func:`shopapp.jobs.states.reopen`, which has already checked
    that ``by`` may reopen the job; returns the voided certificate, or None when
    the job had none.
    """
    cert = current_certificate(session, job)
    if cert is None:
        return None
    text = (reason or "").strip() or "no reason given"
    void_certificate(session, cert, by=by, reason=f"{REOPENED_PREFIX}{text}")
    return cert
