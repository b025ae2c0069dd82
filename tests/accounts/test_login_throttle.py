"""The log-in throttle: failures counted per username typed and per client address in
the database; pauses that double and end by themselves; every checked attempt audited.

Common practice, no source: the numbers follow the usual "a few free tries, then a
pause that grows, capped" scheme of account lockout guidance (value from memory: the
OWASP Authentication Cheat Sheet advises lockout thresholds with a time-bounded lock
and a per-source limit so lockout cannot be used to deny service to every account).
The expected pauses below are worked by hand from the README's numbers, not read from
the code under test.
"""

from __future__ import annotations

import datetime as dt
import json

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session
from werkzeug.security import generate_password_hash

from shopapp.accounts import logins, users
from shopapp.models import AuditEvent, LoginThrottle
from tests.conftest import PASSWORD

T0 = dt.datetime(2026, 11, 2, 8, 0, tzinfo=dt.UTC)
CHEAP = "pbkdf2:sha256:1000"  # a fast hash for tests that make many attempts


@pytest.fixture()
def quick_hashes(monkeypatch):  # type: ignore[no-untyped-def]
    """Unknown usernames are checked against a cheap dummy hash (the real one costs
    about half a second a try on the test machine)."""
    monkeypatch.setattr(users, "_DUMMY_HASH", generate_password_hash("x", method=CHEAP))


@pytest.fixture()
def worker(db: Session, make_user, quick_hashes):  # type: ignore[no-untyped-def]
    user = make_user("operator", username="wanda.test")
    user.password_hash = generate_password_hash(PASSWORD, method=CHEAP)
    db.commit()
    return user


def _try(db: Session, username: str, password: str, *, client: str = "10.0.0.5",
         at: dt.datetime = T0) -> logins.LoginOutcome:
    out = logins.log_in(db, username=username, password=password, client=client, now=at)
    db.commit()
    return out


def _events(db: Session, action: str) -> list[AuditEvent]:
    return list(db.scalars(select(AuditEvent).where(AuditEvent.entity == "login",
                                                    AuditEvent.action == action)
                           .order_by(AuditEvent.id)))


@pytest.mark.parametrize("failures, minutes", [
    (4, None), (5, 1), (6, 2), (7, 4), (8, 8), (9, 15), (40, 15), (10_000, 15)])
def test_account_pause_doubles_from_the_fifth_failure_and_is_capped(failures, minutes) -> None:
    # 1 min at the 5th failure, doubling: 1, 2, 4, 8, then the 15-min cap.
    expected = None if minutes is None else dt.timedelta(minutes=minutes)
    assert logins.lock_length(failures, logins.ACCOUNT_FREE_FAILURES,
                              logins.ACCOUNT_MAX_LOCK) == expected


def test_the_right_password_is_refused_while_paused_and_works_after(db, worker) -> None:
    # Before the fix the right password still worked after 576 failures.
    for i in range(4):
        assert _try(db, "wanda.test", f"guess-{i}", at=T0 + dt.timedelta(seconds=i)).user is None
    fifth = _try(db, "wanda.test", "guess-5", at=T0 + dt.timedelta(seconds=5))
    assert fifth.user is None and fifth.locked_until == T0 + dt.timedelta(seconds=5, minutes=1)
    refused = _try(db, "wanda.test", PASSWORD, at=T0 + dt.timedelta(seconds=30))
    assert refused.user is None
    assert refused.wait_s == 35  # 60 s pause from second 5, asked at second 30
    assert "Log-in is paused for 1 min" in refused.locked_message
    later = _try(db, "wanda.test", PASSWORD, at=T0 + dt.timedelta(seconds=66))
    assert later.user is not None and later.user.id == worker.id
    # The success cleared the username's count: the next typo starts from one again.
    row = db.get(LoginThrottle, ("account", "wanda.test"))
    assert row is None


def test_attempts_during_a_pause_do_not_extend_it_and_write_nothing(db, worker) -> None:
    for i in range(5):
        _try(db, "wanda.test", f"guess-{i}", at=T0)
    before = db.scalar(select(func.count()).select_from(AuditEvent))
    for i in range(50):
        out = _try(db, "wanda.test", f"hammer-{i}", at=T0 + dt.timedelta(seconds=10 + i))
        assert out.locked_until == T0 + dt.timedelta(minutes=1)
    assert db.scalar(select(func.count()).select_from(AuditEvent)) == before
    assert db.get(LoginThrottle, ("account", "wanda.test")).failures == 5


def test_an_unknown_username_is_paused_exactly_like_a_real_one(db, worker) -> None:
    """The answer must not tell whether the account exists."""
    real = [_try(db, "wanda.test", "nope-nope", client=f"10.1.0.{i}") for i in range(6)]
    ghost = [_try(db, "nobody.here", "nope-nope", client=f"10.2.0.{i}") for i in range(6)]
    assert [(o.user, o.locked_until, o.wait_s) for o in real] == \
        [(o.user, o.locked_until, o.wait_s) for o in ghost]
    assert real[-1].locked_message == ghost[-1].locked_message


def test_one_client_cannot_sweep_every_account(db, worker, make_user) -> None:
    """20 failures from one address pause that address, whatever usernames it tries;
    the accounts it tried are not paused (each had one failure) and log in from elsewhere."""
    for i in range(19):
        assert _try(db, f"user{i}", "guess-guess", client="10.9.9.9").locked_until is None
    twentieth = _try(db, "user19", "guess-guess", client="10.9.9.9")
    assert twentieth.locked_until == T0 + dt.timedelta(minutes=1)
    # The paused client cannot even try the right password of a real account ...
    assert _try(db, "wanda.test", PASSWORD, client="10.9.9.9").user is None
    # ... which still opens from another computer.
    assert _try(db, "wanda.test", PASSWORD, client="10.0.0.7").user is not None


def test_client_pauses_grow_to_an_hour_at_most() -> None:
    assert logins.lock_length(20, logins.CLIENT_FREE_FAILURES, logins.CLIENT_MAX_LOCK) == \
        dt.timedelta(minutes=1)
    assert logins.lock_length(26, logins.CLIENT_FREE_FAILURES, logins.CLIENT_MAX_LOCK) == \
        dt.timedelta(minutes=60)  # 2**6 = 64 min, capped


def test_counts_are_forgotten_after_an_hour_without_failure(db, worker) -> None:
    for i in range(4):
        _try(db, "wanda.test", f"guess-{i}", at=T0)
    out = _try(db, "wanda.test", "guess-late", at=T0 + dt.timedelta(hours=1, seconds=1))
    assert out.locked_until is None
    assert db.get(LoginThrottle, ("account", "wanda.test")).failures == 1


def test_failed_and_successful_logins_are_audited_without_the_password(db, worker) -> None:
    _try(db, "Wanda.Test", "secret-guess-1", client="10.3.3.3")
    _try(db, "ghost.user", "secret-guess-2", client="10.3.3.3")
    _try(db, "wanda.test", PASSWORD, client="10.3.3.4")
    failed = _events(db, "login_failed")
    assert [(e.after["username"], e.after["client"], e.after["reason"]) for e in failed] == [
        ("wanda.test", "10.3.3.3", "wrong password"),
        ("ghost.user", "10.3.3.3", "unknown username"),
    ]
    assert failed[0].entity_id == worker.id and failed[1].entity_id is None
    ok = _events(db, "login")
    assert [(e.user_id, e.after["client"]) for e in ok] == [(worker.id, "10.3.3.4")]
    trail = json.dumps([e.after for e in db.scalars(select(AuditEvent))])
    assert "secret-guess" not in trail and PASSWORD not in trail


def test_a_pause_is_audited_once_when_it_starts(db, worker) -> None:
    for i in range(5):
        _try(db, "wanda.test", f"guess-{i}", client="10.4.4.4")
    locked = _events(db, "login_locked")
    assert len(locked) == 1
    assert locked[0].after["kind"] == "account" and locked[0].after["subject"] == "wanda.test"
    assert locked[0].after["failures"] == 5


def test_a_successful_login_without_failures_leaves_the_throttle_alone(db, worker,
                                                                       count_queries) -> None:
    with count_queries() as q:
        _try(db, "wanda.test", PASSWORD)
    writes = [s for s in q.statements if s.lstrip().upper().startswith(("INSERT", "UPDATE",
                                                                        "DELETE"))]
    # The audit event and last_login_at; nothing on login_throttle.
    assert not [s for s in writes if "login_throttle" in s]
    assert len(writes) == 2


def test_an_inactive_account_fails_like_a_wrong_password(db, worker) -> None:
    worker.active = False
    db.commit()
    assert _try(db, "wanda.test", PASSWORD).user is None
    assert _events(db, "login_failed")[-1].after["reason"] == "account inactive"


def test_admin_ends_a_pause_and_it_is_audited(db, worker, make_user) -> None:
    admin = make_user("admin")
    for i in range(5):
        _try(db, "wanda.test", f"guess-{i}")
    assert [r.subject for r in logins.active_locks(db, by=admin, now=T0)] == ["wanda.test"]
    assert logins.end_lock(db, kind="account", subject="wanda.test", by=admin) is True
    db.commit()
    assert _try(db, "wanda.test", PASSWORD, at=T0 + dt.timedelta(seconds=1)).user is not None
    assert _events(db, "unlock")[0].user_id == admin.id
    assert logins.end_lock(db, kind="account", subject="wanda.test", by=admin) is False


def test_only_an_admin_may_see_or_end_pauses(db, make_user) -> None:
    from shopapp.core.errors import PermissionDenied

    quality = make_user("quality")
    with pytest.raises(PermissionDenied):
        logins.active_locks(db, by=quality)
    with pytest.raises(PermissionDenied):
        logins.end_lock(db, kind="account", subject="x", by=quality)
