"""Errors the services raise; the web, CLI and API turn them into messages."""

from __future__ import annotations


class ServiceError(Exception):
    """Base of every domain error; ``message`` is shown to the person as is."""

    status = 400

    def __init__(self, message: str) -> None:
        super().__init__(message)
        self.message = message


class ValidationFailed(ServiceError):
    """Bad input for one field (or several: ``errors`` maps field → message)."""

    status = 422

    def __init__(self, field: str, message: str, errors: dict[str, str] | None = None) -> None:
        super().__init__(f"{field}: {message}")
        self.field = field
        self.errors = errors or {field: message}


class PermissionDenied(ServiceError):
    status = 403


class NotFound(ServiceError):
    status = 404


class TransitionRefused(ServiceError):
    """A job (or certificate) cannot move to the asked state; says why."""

    status = 409


class AlreadySaved(Exception):
    """A create form posted again with a one-time token already spent (back button, double
    click). Not a :class:`ServiceError`: routes must not catch it as a refusal; the app's
    handler rolls back, says so and redirects to what the first post saved (``target``)."""

    def __init__(self, target: str) -> None:
        super().__init__(target)
        self.target = target


# The JSON API's one error shape (``{"error": {"code", "message", "fields"}}``), here so
# that the API's own handlers and the app-wide ones (unknown ``/api/…`` paths are
# answered before any API code runs) build the very same body.
ERROR_CODES: dict[int, str] = {
    400: "bad_request",
    401: "unauthorized",
    403: "forbidden",
    404: "not_found",
    405: "method_not_allowed",
    409: "conflict",
    413: "too_large",
    415: "unsupported_media_type",
    422: "invalid",
    429: "too_many_requests",
    500: "server_error",
    503: "busy",
}


def error_body(status: int, message: str, fields: dict[str, str] | None = None
               ) -> dict[str, dict[str, object]]:
    """The API's error body for ``status``; ``fields`` maps a request field to its message."""
    return {"error": {"code": ERROR_CODES.get(status, f"http_{status}"), "message": message,
                      "fields": dict(fields or {})}}
