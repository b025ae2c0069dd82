"""API tokens: a person's keys for scripts that use the JSON API (issue 14).

A token is a random 32-byte secret shown once, when it is made; only its SHA-256 is
stored. It acts as its user, with the user's role at the time of each request, so a
role change applies at once and an inactive user's tokens stop working. A user manages
their own tokens; an admin manages anyone's (``manage_users``).

Use-cases take the session and the acting user (``by=``), flush and write their audit
event; the caller commits (docs/architecture.md, "Inside a feature package").
"""

from __future__ import annotations

import base64
import datetime as dt
import hashlib
import hmac
import secrets
from dataclasses import dataclass

from sqlalchemy import or_, select, update
from sqlalchemy.orm import Session

from shopapp.core import audit, checks
from shopapp.core.errors import NotFound, PermissionDenied, TransitionRefused
from shopapp.core.permissions import can
from shopapp.models import ApiToken, User, utcnow

TOKEN_PREFIX = "shp_"
SECRET_BYTES = 32
# How stale "last used" may get: one write a minute per token at most, so scripts that
# poll do not turn every read into a write (SQLite has one writer at a time).
LAST_USED_RESOLUTION = dt.timedelta(minutes=1)
MAX_TOKENS_PER_USER = 20


@dataclass(frozen=True)
class NewToken:
    """A token just made: the row and the secret, which is never shown again."""

    token: ApiToken
    secret: str


def secret_hash(secret: str) -> str:
    return hashlib.sha256(secret.encode("utf-8")).hexdigest()


def _may_manage(by: User, owner: User) -> None:
    if by.active and (by.id == owner.id or can(by, "manage_users")):
        return
    raise PermissionDenied(f"a {by.role} may manage only their own API tokens "
                           "(an admin manages anyone's)")


def create_token(session: Session, *, by: User, user: User, name: str) -> NewToken:
    """Make a token for ``user`` named ``name``; the secret is in the result only."""
    _may_manage(by, user)
    e = checks.Errors()
    clean = checks.text(e, "name", name, max_len=100, required=True)
    if not user.active:
        e.add("user", f"{user.username} is inactive: an inactive user's tokens never work")
    live = session.scalars(select(ApiToken.id).where(
        ApiToken.user_id == user.id, ApiToken.revoked_at.is_(None))).all()
    if len(live) >= MAX_TOKENS_PER_USER:
        e.add("name", f"{user.username} already has {len(live)} tokens; revoke one first")
    e.raise_if_any()
    secret = TOKEN_PREFIX + base64.urlsafe_b64encode(
        secrets.token_bytes(SECRET_BYTES)).decode().rstrip("=")
    token = ApiToken(user_id=user.id, name=clean, secret_sha256=secret_hash(secret),
                     prefix=secret[:12], created_by_id=by.id)
    session.add(token)
    session.flush()
    audit.record(session, by=by, entity="api_token", entity_id=token.id, action="create",
                 after={"user": user.username, "name": clean, "prefix": token.prefix})
    return NewToken(token, secret)


def tokens_of(session: Session, *, by: User, user: User) -> list[ApiToken]:
    """``user``'s tokens, live ones first, newest first."""
    _may_manage(by, user)
    return list(session.scalars(select(ApiToken).where(ApiToken.user_id == user.id).order_by(
        ApiToken.revoked_at.is_not(None), ApiToken.created_at.desc(), ApiToken.id.desc())))


def all_tokens(session: Session, *, by: User) -> list[ApiToken]:
    """Every token of the shop (admin), with its user loaded."""
    if not can(by, "manage_users"):
        raise PermissionDenied(f"a {by.role} may not list other people's API tokens")
    return list(session.scalars(select(ApiToken).join(User, User.id == ApiToken.user_id)
                                .order_by(User.username, ApiToken.id)))


def get_token(session: Session, token_id: int) -> ApiToken:
    token = session.get(ApiToken, token_id) if 0 < token_id < 2**31 else None
    if token is None:
        raise NotFound(f"no API token with id {token_id}")
    return token


def revoke_token(session: Session, token: ApiToken, *, by: User) -> ApiToken:
    """Revoke ``token``: it stops working with the next request."""
    _may_manage(by, token.user)
    if token.revoked_at is not None:
        raise TransitionRefused(f"token {token.prefix}… was already revoked")
    token.revoked_at = utcnow()
    token.revoked_by_id = by.id
    session.flush()
    audit.record(session, by=by, entity="api_token", entity_id=token.id, action="revoke",
                 after={"user": token.user.username, "name": token.name,
                        "prefix": token.prefix})
    return token


@dataclass(frozen=True)
class TokenCheck:
    """A presented token that works: whose it is, and whether "last used" is stale."""

    token_id: int
    user_id: int
    stale: bool


def check_secret(session: Session, secret: str, *, now: dt.datetime | None = None
                 ) -> TokenCheck | None:
    """The working token whose secret is ``secret``, or None (unknown, revoked, or its
    user is inactive). Read only; :func:`touch` records the use."""
    if not secret.startswith(TOKEN_PREFIX) or len(secret) > 100:
        return None
    digest = secret_hash(secret)
    row = session.execute(
        select(ApiToken.id, ApiToken.user_id, ApiToken.secret_sha256, ApiToken.revoked_at,
               ApiToken.last_used_at, User.active)
        .join(User, User.id == ApiToken.user_id)
        .where(ApiToken.secret_sha256 == digest)).first()
    # The lookup is by hash; the comparison in constant time guards the last step anyway.
    if row is None or not hmac.compare_digest(row.secret_sha256, digest):
        return None
    if row.revoked_at is not None or not row.active:
        return None
    moment = now or utcnow()
    stale = row.last_used_at is None or moment - row.last_used_at >= LAST_USED_RESOLUTION
    return TokenCheck(row.id, row.user_id, stale)


def touch(session: Session, token_id: int, *, now: dt.datetime | None = None) -> None:
    """Record that the token was used (skipped when another request did it this minute)."""
    moment = now or utcnow()
    session.execute(
        update(ApiToken)
        .where(ApiToken.id == token_id,
               or_(ApiToken.last_used_at.is_(None),
                   ApiToken.last_used_at <= moment - LAST_USED_RESOLUTION))
        .values(last_used_at=moment)
        .execution_options(synchronize_session=False))
