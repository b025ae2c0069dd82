"""View helpers every feature's routes share: role check, acting user, get-or-404,
page size and the request's list page, safe redirects, the create/edit form flow
and the registry's archive button.

Routes parse, call one use-case, commit once, render; these helpers are the only
request-aware code below the features (docs/architecture.md).
"""

from __future__ import annotations

import functools
from collections.abc import Callable, Sequence
from typing import Any, TypeVar
from urllib.parse import urlsplit

from flask import abort, current_app, flash, redirect, render_template, request
from flask_login import current_user, login_required
from flask_wtf import FlaskForm
from sqlalchemy import Select
from sqlalchemy.orm import Session

from shopapp.core.errors import ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.forms import apply_errors
from shopapp.core.pagination import Page, page_number, paginate
from shopapp.core.permissions import can
from shopapp.models import Base, User

F = TypeVar("F", bound=Callable[..., Any])
M = TypeVar("M", bound=Base)

# Ids are 64-bit on SQLite and 32-bit serials on PostgreSQL; anything larger cannot exist.
MAX_ID = 2**31 - 1


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


def acting_user() -> User:
    """The logged-in user, as the use-cases take it (``by=``)."""
    return current_user._get_current_object()


def get_or_404(session: Session, model: type[M], ident: int) -> M:
    """The row of ``model`` with this id, or a 404 page (ids out of range included)."""
    obj = session.get(model, ident) if 0 < ident <= MAX_ID else None
    if obj is None:
        name = model.__name__.lower()
        abort(404, description=f"No {name} with id {ident}.")
    return obj


def page_size() -> int:
    """Rows per list page (setting ``PAGE_SIZE``)."""
    return int(current_app.config.get("PAGE_SIZE", 25))


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


def toggle_archive(
    session: Session,
    obj: Any,
    *,
    archive: Callable[..., Any],
    unarchive: Callable[..., Any],
    on_refused: Callable[[str], Any],
    done: Callable[[bool], str],
) -> Any | None:
    """Body of every registry area's archive button (form field ``unarchive=1`` restores).

    One transaction through the service; a refusal rolls back and returns
    ``on_refused(message)``; success flashes ``done(restored)`` and returns None so
    the view redirects where it likes.
    """
    restore = request.form.get("unarchive") == "1"
    try:
        (unarchive if restore else archive)(session, obj, by=acting_user())
        session.commit()
    except ValidationFailed as exc:
        session.rollback()
        return on_refused(exc.errors.get(exc.field, exc.message))
    flash(done(restore), "success")
    return None


def request_page(
    session: Session, stmt: Select[Any], args: dict[str, Any] | None = None, *,
    scalars: bool = True,
) -> Page[Any]:
    """One page of ``stmt`` for this request: ``?page=``, :func:`page_size`, and ``args``
    (the list's filters) kept in the page links."""
    return paginate(session, stmt, page=page_number(request.args.get("page")),
                    per_page=page_size(), args=args, scalars=scalars)


def form_page(template: str, **context: Any) -> Callable[[int, Sequence[str]], Any]:
    """``render(status, loose)`` for :func:`submit_form`: ``template`` with ``context`` and
    the messages that have no field (``loose``)."""

    def render(status: int, loose: Sequence[str]) -> Any:
        return render_template(template, loose=loose, **context), status

    return render


def submit_form(
    form: FlaskForm,
    render: Callable[[int, Sequence[str]], Any],
    save: Callable[[Session], Any],
    *,
    done: Callable[[Any], tuple[str, str]],
) -> Any:
    """Body of a create/edit page: GET shows the form; POST checks it, runs ``save``
    (one use-case) and commits once.

    ``render(status, loose)`` draws the page (``loose``: messages with no field);
    a use-case's refusal rolls back and draws the form again with its messages
    beside the fields (:func:`shopapp.core.forms.apply_errors`). On success
    ``done(result)`` gives the flash message and where to go.
    """
    if request.method == "GET":
        return render(200, ())
    if not form.validate_on_submit():
        return render(422, ())
    session = db_session()
    try:
        result = save(session)
        session.commit()
    except ValidationFailed as exc:
        session.rollback()
        return render(422, apply_errors(form, exc))
    message, target = done(result)
    flash(message, "success")
    return redirect(target)
