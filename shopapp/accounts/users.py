"""User accounts: create, authenticate, list, change role or password, deactivate."""

from __future__ import annotations

import re

from sqlalchemy import func, select
from sqlalchemy.orm import Session
from werkzeug.security import check_password_hash, generate_password_hash

from shopapp.accounts.password_rules import password_problem
from shopapp.core import audit
from shopapp.core.checks import plain_digits
from shopapp.core.errors import NotFound, ValidationFailed
from shopapp.core.permissions import require
from shopapp.models import ROLES, User

USERNAME_RE = re.compile(r"^[a-z0-9][a-z0-9._-]{1,63}$")
# A hash to compare against when the username is unknown, so a wrong username
# costs as long as a wrong password (no user enumeration by timing).
_DUMMY_HASH = generate_password_hash("not-a-real-password")


def hash_password(password: str) -> str:
    """werkzeug's scrypt hash (its default method)."""
    return generate_password_hash(password)


def check_password(user: User, password: str) -> bool:
    return check_password_hash(user.password_hash, password)


def validate_password(password: str, *, username: str) -> None:
    """Refuse a new password for ``username`` that breaks a rule of
    :mod:`shopapp.accounts.password_rules` (message on the ``password`` field)."""
    problem = password_problem(password, username=username)
    if problem is not None:
        raise ValidationFailed("password", problem)


def create_user(
    session: Session,
    *,
    username: str,
    full_name: str,
    role: str,
    password: str,
    by: User | None = None,
) -> User:
    """Create an active user. ``by`` is None only for the first admin and the CLI;
    a given ``by`` must be allowed to manage users, and the new user is asked for an own
    password at the first log-in (``must_change_password``): the administrator knows this
    one."""
    if by is not None:
        require(by, "manage_users")
    username = username.strip().lower()
    if not USERNAME_RE.match(username):
        raise ValidationFailed(
            "username",
            f"{username!r} is not allowed: 2–64 characters, lower-case letters, digits, '.', '_' "
            "or '-', starting with a letter or digit",
        )
    if role not in ROLES:
        raise ValidationFailed("role", f"{role!r} is not a role; choose one of {', '.join(ROLES)}")
    validate_password(password, username=username)
    exists = session.scalar(select(func.count()).select_from(User).where(User.username == username))
    if exists:
        raise ValidationFailed("username", f"{username!r} is already taken")
    user = User(
        username=username,
        full_name=full_name.strip() or username,
        role=role,
        password_hash=hash_password(password),
        active=True,
        must_change_password=by is not None,
    )
    session.add(user)
    session.flush()
    audit.record(
        session, by=by, entity="user", entity_id=user.id, action="create",
        after={"username": user.username, "role": user.role, "full_name": user.full_name},
    )
    return user


def burn_password_check(password: str) -> None:
    """Spend the time of a password check when there is no user to check against."""
    check_password_hash(_DUMMY_HASH, password)


def end_sessions(user: User) -> None:
    """End every log-in session ``user`` has open: each stores the session version it
    began with, and a request whose version differs is logged out."""
    user.session_version = (user.session_version or 0) + 1


def load_active_user(session: Session, user_id: str) -> User | None:
    """The active user whose id is stored in the log-in session, or None (unknown id,
    junk, or a user deactivated since)."""
    if not plain_digits(user_id) or len(user_id) > 10:
        return None
    user = session.get(User, int(user_id))
    return user if user is not None and user.active else None


def get_user_by_name(session: Session, username: str) -> User:
    user = session.scalar(select(User).where(User.username == username.strip().lower()))
    if user is None:
        raise ValidationFailed("username", f"no user called {username.strip().lower()!r}")
    return user


def get_user(session: Session, user_id: int) -> User:
    user = session.get(User, user_id)
    if user is None:
        raise NotFound(f"no user with id {user_id}")
    return user


def list_users(session: Session) -> list[User]:
    return list(session.scalars(select(User).order_by(User.username)))


def count_users(session: Session) -> int:
    return session.scalar(select(func.count()).select_from(User)) or 0


# Fields of a user that audit events may show (never the password hash).
_AUDITED = ("username", "full_name", "role", "active")


def _count_other_active_admins(session: Session, user: User) -> int:
    stmt = (
        select(func.count())
        .select_from(User)
        .where(User.role == "admin", User.active.is_(True), User.id != user.id)
    )
    return session.scalar(stmt) or 0


def _keeps_an_admin(session: Session, user: User, field: str) -> None:
    """Refuse a change that would leave the shop without an active admin."""
    if user.role == "admin" and user.active and _count_other_active_admins(session, user) == 0:
        raise ValidationFailed(
            field, f"{user.username} is the last active admin; make another admin first"
        )


def set_role(session: Session, user: User, *, by: User, role: str) -> User:
    """Give ``user`` another role (admin only; not one's own, never the last admin away)."""
    require(by, "manage_users")
    if role not in ROLES:
        raise ValidationFailed("role", f"{role!r} is not a role; choose one of {', '.join(ROLES)}")
    if role == user.role:
        return user
    if user.id == by.id:
        raise ValidationFailed("role", "you cannot change your own role; ask another admin")
    if role != "admin":
        _keeps_an_admin(session, user, "role")
    before = audit.snapshot(user, _AUDITED)
    user.role = role
    session.flush()
    audit.record(
        session, by=by, entity="user", entity_id=user.id, action="set_role",
        before=before, after=audit.snapshot(user, _AUDITED),
    )
    return user


def set_active(session: Session, user: User, *, by: User, active: bool) -> User:
    """Deactivate (no log-in, history kept) or reactivate a user (admin only).

    An admin cannot deactivate themselves, nor the last active admin.
    """
    require(by, "manage_users")
    if bool(active) == user.active:
        return user
    if not active:
        if user.id == by.id:
            raise ValidationFailed("active", "you cannot deactivate yourself; ask another admin")
        _keeps_an_admin(session, user, "active")
    before = audit.snapshot(user, _AUDITED)
    user.active = bool(active)
    session.flush()
    audit.record(
        session, by=by, entity="user", entity_id=user.id,
        action="activate" if active else "deactivate",
        before=before, after=audit.snapshot(user, _AUDITED),
    )
    return user


def reset_password(session: Session, user: User, *, by: User | None, password: str) -> User:
    """Set a new password for ``user`` and end the user's sessions; the audit event holds
    no hash. ``by`` must be allowed to manage users; None only for the CLI (whoever runs
    ``shopapp user password`` on the server already holds the database)."""
    if by is not None:
        require(by, "manage_users")
    validate_password(password, username=user.username)
    user.password_hash = hash_password(password)
    # Given by somebody else: the user sets an own one at the next log-in.
    user.must_change_password = by is not None and by.id != user.id
    end_sessions(user)
    session.flush()
    audit.record(
        session, by=by, entity="user", entity_id=user.id, action="reset_password",
        after={"username": user.username},
    )
    return user


def change_own_password(
    session: Session, user: User, *, current_password: str, password: str
) -> User:
    """The user sets a new password, proving the current one. Every other session of
    the user ends; the caller keeps this one by storing the new session version."""
    if not check_password(user, current_password):
        raise ValidationFailed("current_password", "is not your current password")
    if check_password(user, password):
        raise ValidationFailed("password", "is your current password; choose a new one")
    validate_password(password, username=user.username)
    user.password_hash = hash_password(password)
    user.must_change_password = False
    end_sessions(user)
    session.flush()
    audit.record(
        session, by=user, entity="user", entity_id=user.id, action="change_password",
        after={"username": user.username},
    )
    return user
