"""Who is calling: the ``Authorization: Bearer <token>`` header, and nothing else.

The API never reads the log-in session cookie, so a page visit in the same browser
cannot lend its login to a script (and the API needs no CSRF token: a forged
cross-site request cannot set this header). The token's use is recorded at most once
a minute, in a short write of its own before the request's work begins
(:func:`shopapp.accounts.api_tokens.touch`).
"""

from __future__ import annotations

from flask import g, request

from shopapp.accounts import api_tokens
from shopapp.core.extensions import get_database
from shopapp.models import User


class Unauthorized(Exception):
    """No working token; ``message`` says what was wrong with what was sent."""

    def __init__(self, message: str) -> None:
        super().__init__(message)
        self.message = message


def _bearer() -> str:
    header = request.headers.get("Authorization")
    if header is None:
        raise Unauthorized("send an API token: Authorization: Bearer <token> (make one on "
                           "the API tokens page or with `shopapp token add`)")
    scheme, _, secret = header.strip().partition(" ")
    if scheme.lower() != "bearer" or not secret.strip():
        raise Unauthorized("the Authorization header must be 'Bearer <token>'")
    return secret.strip()


def current_api_user() -> User:
    """The user whose working token this request carries (loaded, not attached to the
    request's session); raises :class:`Unauthorized`."""
    if "api_user" in g:
        return g.api_user
    secret = _bearer()
    database = get_database()
    # Looked up in a session of its own: the request's session is opened only by the
    # operations that use the database (a POST's one takes the write lock up front).
    with database.session() as sess:
        found = api_tokens.check_secret(sess, secret)
        user = sess.get(User, found.user_id) if found is not None else None
        if user is not None:
            sess.expunge(user)
    if found is None or user is None or not user.active:
        raise Unauthorized("the API token is unknown, revoked, or its user is inactive")
    if found.stale:
        with database.write_session() as sess:
            api_tokens.touch(sess, found.token_id)
    g.api_user = user
    return user
