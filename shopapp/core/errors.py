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
