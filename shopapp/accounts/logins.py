"""Log-in attempts: the throttle against password guessing, the log-in audit trail,
log-out, and the per-user session version that ends sessions.

Throttle (numbers in README, "Logins and sessions"): failures are counted per username
typed (whether or not such a user exists, so a lock tells nothing about accounts) and
per client address, in the ``login_throttle`` table so every server process and both
database backends share the counts. From the ``*_FREE_FAILURES``-th failure on, log-ins
for that username or from that client are refused for a time that doubles with each
further failure, up to a cap; counts are forgotten after ``FORGET_AFTER`` without a
failure. A lock always ends by itself. Attempts refused by a lock check no password,
change no count and write nothing, so hammering a locked username cannot extend its
lock, and a client must get past its own limit before it can lock anyone: one client
cannot sweep every account into a lock.

Audit: every attempt whose password was checked is an ``AuditEvent`` (entity
``login``: ``login`` or ``login_failed`` with the username tried, the client and the
reason; never the password), and so is the start of every lock (``login_locked``).
A successful log-in writes its audit event and ``last_login_at``; it touches the
throttle only when the username had failures to clear.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from sqlalchemy import Select, case, select, tuple_, update
from sqlalchemy.dialects.postgresql import insert as pg_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert
from sqlalchemy.orm import Session

from shopapp.accounts import users
from shopapp.core import audit
from shopapp.core.display import plain
from shopapp.core.permissions import require
from shopapp.models import AuditEvent, LoginThrottle, User, utcnow

# Failures allowed before the first lock, per username typed and per client address.
# A client gets more: several people of a shop may share one address (a proxy, NAT).
ACCOUNT_FREE_FAILURES = 5
CLIENT_FREE_FAILURES = 20
FIRST_LOCK = dt.timedelta(minutes=1)
ACCOUNT_MAX_LOCK = dt.timedelta(minutes=15)
CLIENT_MAX_LOCK = dt.timedelta(minutes=60)
# A count restarts when its last failure is older than this.
FORGET_AFTER = dt.timedelta(hours=1)

USERNAME_MAX = 64
CLIENT_MAX = 100
LOCKED_MESSAGE = (
    "Too many failed log-ins for this username or from this computer. "
    "Log-in is paused for {minutes} min; try again after that."
)


@dataclass(frozen=True)
class LoginOutcome:
    """``user`` when the log-in succeeded; ``locked_until`` when log-ins for this
    username or from this client are paused (refused now, or paused by this failure)."""

    user: User | None
    locked_until: dt.datetime | None = None
    # Seconds until the pause ends (the HTTP Retry-After), 0 when there is none.
    wait_s: int = 0

    @property
    def locked_message(self) -> str:
        minutes = max(1, math.ceil(self.wait_s / 60))
        return LOCKED_MESSAGE.format(minutes=plain(minutes))


def _paused(until: dt.datetime, now: dt.datetime) -> LoginOutcome:
    wait = max(1, math.ceil((until - now).total_seconds()))
    return LoginOutcome(user=None, locked_until=until, wait_s=wait)


def policy_figures() -> dict[str, str]:
    """The throttle's numbers as shown to people (admin page)."""
    return {
        "free_account": plain(ACCOUNT_FREE_FAILURES),
        "free_client": plain(CLIENT_FREE_FAILURES),
        "max_account": plain(ACCOUNT_MAX_LOCK.total_seconds() / 60),
        "max_client": plain(CLIENT_MAX_LOCK.total_seconds() / 60),
    }


def lock_length(failures: int, free: int, longest: dt.timedelta) -> dt.timedelta | None:
    """How long the ``failures``-th failure in a row pauses log-ins: none below ``free``,
    then ``FIRST_LOCK`` doubling with each further failure, at most ``longest``."""
    if failures < free:
        return None
    doublings = min(failures - free, 30)  # 2**30 minutes is far past any cap
    return min(FIRST_LOCK * 2**doublings, longest)


def _keys(username: str, client: str) -> tuple[tuple[str, str], tuple[str, str]]:
    return (("account", username), ("client", client))


def _insert(session: Session) -> Callable[..., Any]:
    """The dialect's INSERT, which knows ``ON CONFLICT … DO UPDATE``."""
    return sqlite_insert if session.get_bind().dialect.name == "sqlite" else pg_insert


def _count_failure(session: Session, kind: str, subject: str, now: dt.datetime) -> int:
    """Add one failure to ``(kind, subject)`` in one statement (no lost update between
    server processes) and return the count, restarted when the last one is stale."""
    table = LoginThrottle.__table__
    stmt = _insert(session)(LoginThrottle).values(
        kind=kind, subject=subject, failures=1, last_failure_at=now, locked_until=None
    )
    stale = table.c.last_failure_at < now - FORGET_AFTER
    stmt = stmt.on_conflict_do_update(
        index_elements=["kind", "subject"],
        set_={
            "failures": case((stale, 1), else_=table.c.failures + 1),
            "last_failure_at": stmt.excluded.last_failure_at,
        },
    ).returning(table.c.failures)
    return int(session.execute(stmt).scalar_one())


def _normalise(username: str, client: str | None) -> tuple[str, str]:
    return username.strip().lower()[:USERNAME_MAX], (client or "unknown")[:CLIENT_MAX]


@dataclass(frozen=True)
class Attempt:
    """What the read phase of a log-in found: the username and client as counted, the
    user whose password matched (``reason`` None) or why not, or the pause in force."""

    username: str
    client: str
    user_id: int | None
    reason: str | None
    paused: LoginOutcome | None = None


def _pause_in_force(session: Session, name: str, where: str,
                    now: dt.datetime) -> LoginOutcome | None:
    rows = session.scalars(
        select(LoginThrottle.locked_until).where(
            tuple_(LoginThrottle.kind, LoginThrottle.subject).in_(_keys(name, where)),
            LoginThrottle.locked_until > now)
    )
    ends = [until for until in rows if until is not None]
    return _paused(max(ends), now) if ends else None


def check_attempt(
    session: Session, *, username: str, password: str, client: str | None,
    now: dt.datetime | None = None,
) -> Attempt:
    """Read only: the pause in force, the user, and the password check (slow by design:
    scrypt). The web runs it before taking the database's write lock, so a log-in does
    not hold every other writer up while the hash is computed."""
    now = now or utcnow()
    name, where = _normalise(username, client)
    paused = _pause_in_force(session, name, where, now)
    if paused is not None:
        return Attempt(name, where, None, "paused", paused)
    user = session.scalar(select(User).where(User.username == name))
    if user is None:
        users.burn_password_check(password)
        return Attempt(name, where, None, "unknown username")
    if not users.check_password(user, password):
        return Attempt(name, where, user.id, "wrong password")
    if not user.active:
        return Attempt(name, where, user.id, "account inactive")
    return Attempt(name, where, user.id, None)


def log_in(
    session: Session, *, username: str, password: str, client: str | None,
    now: dt.datetime | None = None,
) -> LoginOutcome:
    """Check a log-in attempt against the throttle and the password, count and audit it,
    in one session. Flushes; the caller commits (after a failure too: it must count)."""
    now = now or utcnow()
    attempt = check_attempt(session, username=username, password=password, client=client,
                            now=now)
    return record_attempt(session, attempt, now=now)


def record_attempt(session: Session, attempt: Attempt, *,
                   now: dt.datetime | None = None) -> LoginOutcome:
    """The writes of a log-in attempt checked by :func:`check_attempt`: the audit event,
    the failure counts and any pause they start, or the successful log-in.

    A pause that began since the check (another process) still refuses the attempt.
    Flushes; the caller commits.
    """
    now = now or utcnow()
    if attempt.paused is not None:
        return attempt.paused
    name, where = attempt.username, attempt.client
    keys = _keys(name, where)
    paused = _pause_in_force(session, name, where, now)
    if paused is not None:
        return paused
    user = session.get(User, attempt.user_id) if attempt.user_id is not None else None
    reason = attempt.reason
    if reason is None and (user is None or not user.active):
        reason = "account inactive"  # deactivated since the check
    if reason is None and user is not None:
        user.last_login_at = now
        # Only a username with failures to clear is written to.
        counted = session.get(LoginThrottle, ("account", name))
        if counted is not None:
            session.delete(counted)
        session.flush()
        audit.record(session, by=user, entity="login", entity_id=user.id, action="login",
                     after={"username": name, "client": where})
        return LoginOutcome(user=user)

    audit.record(session, by=None, entity="login", entity_id=attempt.user_id,
                 action="login_failed",
                 after={"username": name, "client": where, "reason": reason})
    until: dt.datetime | None = None
    for (kind, subject), free, longest in zip(
        keys, (ACCOUNT_FREE_FAILURES, CLIENT_FREE_FAILURES), (ACCOUNT_MAX_LOCK, CLIENT_MAX_LOCK),
        strict=True,
    ):
        failures = _count_failure(session, kind, subject, now)
        length = lock_length(failures, free, longest)
        if length is None:
            continue
        ends = now + length
        session.execute(
            update(LoginThrottle)
            .where(LoginThrottle.kind == kind, LoginThrottle.subject == subject)
            .values(locked_until=ends)
            .execution_options(synchronize_session=False)
        )
        audit.record(session, by=None, entity="login", entity_id=None, action="login_locked",
                     after={"kind": kind, "subject": subject, "failures": failures,
                            "until": ends.isoformat(), "username": name, "client": where})
        until = ends if until is None else max(until, ends)
    session.flush()
    return LoginOutcome(user=None) if until is None else _paused(until, now)


def log_out(session: Session, user: User, *, client: str | None) -> None:
    """End every session of ``user`` (this one and any other, on any computer)."""
    users.end_sessions(user)
    session.flush()
    audit.record(session, by=user, entity="login", entity_id=user.id, action="logout",
                 after={"username": user.username, "client": _normalise("", client)[1]})


def session_is_current(user: User, version: object) -> bool:
    """True when a log-in session that stored ``version`` is still valid for ``user``."""
    return isinstance(version, int) and not isinstance(version, bool) \
        and version == user.session_version


FAILURE_ACTIONS = ("login_failed", "login_locked")


def recent_failures_query() -> Select[Any]:
    """Failed log-ins and locks, newest first (the admin's page paginates it)."""
    return (
        select(AuditEvent)
        .where(AuditEvent.entity == "login", AuditEvent.action.in_(FAILURE_ACTIONS))
        .order_by(AuditEvent.at.desc(), AuditEvent.id.desc())
    )


def active_locks(session: Session, *, by: User, now: dt.datetime | None = None,
                 limit: int = 50) -> list[LoginThrottle]:
    """Locks in force now (admin), the longest first."""
    require(by, "manage_users")
    now = now or utcnow()
    return list(session.scalars(
        select(LoginThrottle).where(LoginThrottle.locked_until > now)
        .order_by(LoginThrottle.locked_until.desc()).limit(limit)
    ))


def end_lock(session: Session, *, kind: str, subject: str, by: User) -> bool:
    """Lift a lock and forget its failures (admin); audited. False when there was none."""
    require(by, "manage_users")
    row = session.get(LoginThrottle, (kind, subject))
    if row is not None:
        session.delete(row)
        audit.record(session, by=by, entity="login", entity_id=None, action="unlock",
                     after={"kind": kind, "subject": subject})
        session.flush()
    return row is not None
