"""Template helpers and the view-side role check."""

from __future__ import annotations

import functools
from collections.abc import Callable
from typing import Any, TypeVar
from urllib.parse import urlsplit

from flask import Flask, abort
from flask_login import current_user, login_required

from shopapp.services.permissions import can

F = TypeVar("F", bound=Callable[..., Any])


def requires(action: str) -> Callable[[F], F]:
    """Login required, then 403 unless the user's role may do ``action``."""

    def decorator(view: F) -> F:
        @functools.wraps(view)
        @login_required
        def wrapped(*args: Any, **kwargs: Any) -> Any:
            if not can(current_user, action):
                abort(403, description=f"Your role ({current_user.role}) may not do this.")
            return view(*args, **kwargs)

        return wrapped  # type: ignore[return-value]

    return decorator


def safe_next(target: str | None, fallback: str) -> str:
    """``target`` when it is a path inside this app, else ``fallback`` (no open redirect)."""
    if not target:
        return fallback
    parts = urlsplit(target)
    if parts.scheme or parts.netloc or not target.startswith("/") or target.startswith("//"):
        return fallback
    if "\\" in target:
        return fallback
    return target


def register_helpers(app: Flask) -> None:
    @app.context_processor
    def _inject() -> dict[str, Any]:
        return {
            "can": lambda action: can(current_user, action) if current_user else False,
            "endpoints": app.view_functions,
        }
