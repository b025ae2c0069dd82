"""Error pages: a person sees a plain page, never a traceback."""

from __future__ import annotations

import logging

from flask import Flask, render_template, request
from flask_wtf.csrf import CSRFError
from werkzeug.exceptions import HTTPException

from shopapp.core.errors import ServiceError

log = logging.getLogger("shopapp.web")


def _wants_json() -> bool:
    return request.path.startswith("/api/") or request.accept_mimetypes.best == "application/json"


def _page(status: int, title: str, message: str):  # type: ignore[no-untyped-def]
    if _wants_json():
        return {"error": title, "message": message}, status
    return render_template("error.html", status=status, title=title, message=message), status


def register_error_pages(app: Flask) -> None:
    @app.errorhandler(CSRFError)
    def _csrf(exc: CSRFError):  # type: ignore[no-untyped-def]
        return _page(
            400, "Form expired or forged", f"{exc.description} Reload the page and try again."
        )

    @app.errorhandler(ServiceError)
    def _service(exc: ServiceError):  # type: ignore[no-untyped-def]
        return _page(exc.status, "Not possible", exc.message)

    @app.errorhandler(HTTPException)
    def _http(exc: HTTPException):  # type: ignore[no-untyped-def]
        return _page(exc.code or 500, exc.name, exc.description or "")

    @app.errorhandler(Exception)
    def _unexpected(exc: Exception):  # type: ignore[no-untyped-def]
        log.exception("unhandled error on %s %s", request.method, request.path)
        return _page(500, "Something went wrong", "The error was logged; nothing was saved.")
