"""User accounts: create, authenticate, list, change role or password, deactivate."""

from __future__ import annotations

import re

from sqlalchemy import func, select
from sqlalchemy.orm import Session
from werkzeug.security import check_password_hash, generate_password_hash

from shopapp.core import audit
from shopapp.core.errors import NotFound, ValidationFailed
from shopapp.core.permissions import require
from shopapp.models import ROLES, User, utcnow

USERNAME_RE = re.compile(r"^[a-z0-9][a-z0-9._-]{1,63}$")
MIN_PASSWORD_LENGTH = 8
# A hash to compare against when the username is unknown, so a wrong username
# costs as long as a wrong password (no user enumeration by timing).
_DUMMY_HASH = generate_password_hash("not-a-real-password")


def hash_password(password: str) -> str:
    """werkzeug's scrypt hash (its default method)."""
    return generate_password_hash(password)


def check_password(user: User, password: str) -> bool:
    return check_password_hash(user.password_hash, password)


def validate_password(password: str) -> None:
    if len(password) < MIN_PASSWORD_LENGTH:
        raise ValidationFailed(
            "password", f"must be at least {MIN_PASSWORD_LENGTH} characters long"
        )


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
    a given ``by`` must be allowed to manage users."""
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
    validate_password(password)
    exists = session.scalar(select(func.count()).select_from(User).where(User.username == username))
    if exists:
        raise ValidationFailed("username", f"{username!r} is already taken")
    user = User(
        username=username,
        full_name=full_name.strip() or username,
        role=role,
        password_hash=hash_password(password),
        active=True,
    )
    session.add(user)
    session.flush()
    audit.record(
        session, by=by, entity="user", entity_id=user.id, action="create",
        after={"username": user.username, "role": user.role, "full_name": user.full_name},
    )
    return user


def authenticate(session: Session, username: str, password: str) -> User | None:
    """The active user with these credentials, or None."""
    user = session.scalar(select(User).where(User.username == username.strip().lower()))
    if user is None:
        check_password_hash(_DUMMY_HASH, password)
        return None
    if not check_password(user, password) or not user.active:
        return None
    user.last_login_at = utcnow()
    return user


def load_active_user(session: Session, user_id: str) -> User | None:
    """The active user whose id is stored in the log-in session, or None (unknown id,
    junk, or a user deactivated since)."""
    if not user_id.isdigit() or len(user_id) > 10:
        return None
    user = session.get(User, int(user_id))
    return user if user is not None and user.active else None


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


def reset_password(session: Session, user: User, *, by: User, password: str) -> User:
    """Set a new password for ``user`` (admin only); the audit event holds no hash."""
    require(by, "manage_users")
    if len(password) > 200:
        raise ValidationFailed("password", "is too long: at most 200 characters")
    validate_password(password)
    user.password_hash = hash_password(password)
    session.flush()
    audit.record(
        session, by=by, entity="user", entity_id=user.id, action="reset_password",
        after={"username": user.username},
    )
    return user
