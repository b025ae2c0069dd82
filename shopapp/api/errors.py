"""Every refusal under /api answers the one JSON error shape, never an HTML page.

Handlers on the API blueprint catch what its views raise; a path under /api that
matches no route (404, 405) never reaches the blueprint, and the app-wide handlers of
:mod:`shopapp.web.errors` answer it with the same body (:func:`shopapp.core.errors.error_body`).
"""

from __future__ import annotations

import logging

from flask import Blueprint, Response, request
from sqlalchemy.exc import DBAPIError, OperationalError
from werkzeug.exceptions import HTTPException

from shopapp.api.auth import Unauthorized
from shopapp.api.operations import ApiError, json_error
from shopapp.core.errors import ServiceError
from shopapp.core.extensions import discard_db_session

log = logging.getLogger("shopapp.api")

BUSY = "the shop's database was busy with another save for too long; nothing was saved, " \
       "send the request again in a moment"


def _busy(exc: DBAPIError) -> bool:
    if isinstance(exc, OperationalError) and "locked" in str(exc.orig).lower():
        return True
    return getattr(exc.orig, "sqlstate", "") in ("40001", "40P01")


def register_error_handlers(bp: Blueprint) -> None:
    @bp.errorhandler(ApiError)
    def _api(exc: ApiError) -> Response:
        return json_error(exc.status, exc.message, exc.fields)

    @bp.errorhandler(Unauthorized)
    def _unauthorized(exc: Unauthorized) -> Response:
        return json_error(401, exc.message, headers={"WWW-Authenticate": "Bearer"})

    @bp.errorhandler(ServiceError)
    def _service(exc: ServiceError) -> Response:
        return json_error(exc.status, exc.message)

    @bp.errorhandler(HTTPException)
    def _http(exc: HTTPException) -> Response:
        return json_error(exc.code or 400, exc.description or exc.name)

    @bp.errorhandler(DBAPIError)
    def _database(exc: DBAPIError) -> Response:
        discard_db_session()
        if _busy(exc):
            log.warning("busy database on %s %s: %s", request.method, request.path, exc.orig)
            return json_error(503, BUSY, headers={"Retry-After": "2"})
        log.exception("database error on %s %s", request.method, request.path)
        return json_error(500, "the error was logged; nothing was saved")

    @bp.errorhandler(Exception)
    def _unexpected(exc: Exception) -> Response:
        discard_db_session()
        log.exception("unhandled error on %s %s", request.method, request.path)
        return json_error(500, "the error was logged; nothing was saved")
