"""Error pages: a person sees a plain page, never a traceback.

A server error may come from a failed database session (a lock wait that ran
out, a broken connection): the handler first throws that session away and then
renders a page that touches neither the database nor the logged-in user, so the
error page itself cannot fail and still carries the security headers.
"""

from __future__ import annotations

import logging
from urllib.parse import urlsplit

from flask import Flask, current_app, flash, redirect, render_template, request, session, url_for
from flask_wtf.csrf import CSRFError
from sqlalchemy.exc import DBAPIError, OperationalError
from werkzeug.exceptions import HTTPException

from shopapp.core.errors import AlreadySaved, ServiceError, error_body
from shopapp.core.extensions import discard_db_session
from shopapp.core.web import ALREADY_SAVED_MESSAGE, safe_next, session_end_notice

log = logging.getLogger("shopapp.web")

BUSY_MESSAGE = ("The shop's database was busy with another save for too long. Nothing was "
                "saved; send the form again in a moment.")


def _wants_json() -> bool:
    return request.path.startswith("/api/") or request.accept_mimetypes.best == "application/json"


def _page(status: int, title: str, message: str, *, plain: bool = False,  # type: ignore[no-untyped-def]
          login_url: str | None = None):
    if request.path.startswith("/api/"):
        # Paths under /api that match no API route: the API's one error shape.
        return error_body(status, message or title), status
    if _wants_json():
        return {"error": {"code": status, "title": title, "message": message}}, status
    template = "error_plain.html" if plain else "error.html"
    return render_template(template, status=status, title=title, message=message,
                           login_url=login_url), status


def _is_busy(exc: DBAPIError) -> bool:
    """A lock wait that ran out (SQLite) or a serialization failure/deadlock (PostgreSQL)."""
    if isinstance(exc, OperationalError) and "locked" in str(exc.orig).lower():
        return True
    return getattr(exc.orig, "sqlstate", "") in ("40001", "40P01")


def register_error_pages(app: Flask) -> None:
    @app.errorhandler(CSRFError)
    def _csrf(exc: CSRFError):  # type: ignore[no-untyped-def]
        if "_user_id" not in session and request.path != url_for("auth.login"):
            # No login in the session: it ran out while the page was open (the browser
            # dropped the expired cookie), so the form's token has nothing to match.
            back = safe_next(urlsplit(request.referrer or "").path or None, "/")
            return _page(400, "Your session had ended: nothing was saved", (
                "Your session had ended, so what this form sent was not saved. "
                + session_end_notice(current_app.config["PERMANENT_SESSION_LIFETIME"])
                + " Log in again, then enter it once more."),
                login_url=url_for("auth.login", next=back))
        return _page(
            400, "Form expired or forged", f"{exc.description} Reload the page and try again."
        )

    @app.errorhandler(AlreadySaved)
    def _already_saved(exc: AlreadySaved):  # type: ignore[no-untyped-def]
        # The repeated post wrote nothing; whatever it began is thrown away.
        discard_db_session()
        flash(ALREADY_SAVED_MESSAGE, "info")
        return redirect(exc.target, code=303)

    @app.errorhandler(ServiceError)
    def _service(exc: ServiceError):  # type: ignore[no-untyped-def]
        return _page(exc.status, "Not possible", exc.message)

    @app.errorhandler(HTTPException)
    def _http(exc: HTTPException):  # type: ignore[no-untyped-def]
        return _page(exc.code or 500, exc.name, exc.description or "")

    @app.errorhandler(DBAPIError)
    def _database(exc: DBAPIError):  # type: ignore[no-untyped-def]
        discard_db_session()
        if _is_busy(exc):
            log.warning("busy database on %s %s: %s", request.method, request.path, exc.orig)
            response, status = _page(503, "Busy, nothing saved", BUSY_MESSAGE, plain=True)
            return response, status, {"Retry-After": "2"}
        log.exception("database error on %s %s", request.method, request.path)
        return _page(500, "Something went wrong", "The error was logged; nothing was saved.",
                     plain=True)

    @app.errorhandler(Exception)
    def _unexpected(exc: Exception):  # type: ignore[no-untyped-def]
        discard_db_session()
        log.exception("unhandled error on %s %s", request.method, request.path)
        return _page(500, "Something went wrong", "The error was logged; nothing was saved.",
                     plain=True)
