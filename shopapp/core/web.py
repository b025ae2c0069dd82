"""View helpers every feature's routes share: role check, acting user, get-or-404,
page size and the request's list page, safe redirects, the create/edit form flow
and the registry's archive button.

Routes parse, call one use-case, commit once, render; these helpers are the only
request-aware code below the features (docs/architecture.md).
"""

from __future__ import annotations

import datetime as dt
import functools
import re
from collections.abc import Callable, Sequence
from typing import Any, TypeVar
from urllib.parse import urlsplit

from flask import abort, current_app, flash, redirect, render_template, request
from flask_login import current_user, login_required
from flask_wtf import FlaskForm
from sqlalchemy import Select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from shopapp.core.display import counted
from shopapp.core.errors import AlreadySaved, ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.forms import OnceForm, apply_errors
from shopapp.core.pagination import Page, page_number, paginate
from shopapp.core.permissions import can
from shopapp.models import Base, SubmissionToken, User

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


def session_end_notice(lifetime: dt.timedelta) -> str:
    """How long a session lasts, as the login page and the ended-session page say it."""
    minutes = int(lifetime.total_seconds() // 60)
    return f"A session ends after {counted(minutes, 'minute')} without use."


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


# What new_form_token issues (token_urlsafe(24) is 32 characters); the column holds 80.
_TOKEN_RE = re.compile(r"[A-Za-z0-9_-]{16,80}")

ALREADY_SAVED_MESSAGE = "This form was already saved; nothing was saved twice."


def once(session: Session, form: OnceForm,
         target: Callable[[SubmissionToken], str]) -> Callable[[Any], None]:
    """Guard a create form against being saved twice; call before saving it.

    A token already spent raises :class:`~shopapp.core.errors.AlreadySaved` with
    ``target(spent_row)``, the page of what the first post saved (the app flashes
    :data:`ALREADY_SAVED_MESSAGE` and redirects there). A missing or malformed
    token is a 400: the form did not come from one of our pages. Returns
    ``spend(result)``, to call after the use-case and before the commit: it stores
    the token with what was created, in the same transaction; a twin posted at
    the same moment that got past this check loses on the token's primary key and
    is rolled back whole (exactly one write).
    """
    raw = form.form_token.data
    token = raw if isinstance(raw, str) else ""
    if not _TOKEN_RE.fullmatch(token):
        abort(400, description="The form has no valid one-time token (form_token); reload the "
                               "page and send it again. Nothing was saved.")
    spent = session.get(SubmissionToken, token)
    if spent is not None:
        raise AlreadySaved(target(spent))

    def spend(result: Any) -> None:
        entity, entity_id = (request.endpoint or "form")[:40], 0
        row_id = getattr(result, "id", None)
        if isinstance(result, Base) and isinstance(row_id, int):
            entity, entity_id = type(result).__tablename__, row_id
        try:
            with session.begin_nested():
                session.add(SubmissionToken(token=token, user_id=acting_user().id,
                                            entity=entity, entity_id=entity_id))
        except IntegrityError:
            session.rollback()
            twin = session.get(SubmissionToken, token)
            if twin is None:  # not the token's key after all: a real error
                raise
            raise AlreadySaved(target(twin)) from None

    return spend


def saved_row(session: Session, spent: SubmissionToken) -> Base | None:
    """The row a spent token created (by its table name and id), if it still exists."""
    for mapper in Base.registry.mappers:
        cls = mapper.class_
        if getattr(cls, "__tablename__", None) == spent.entity:
            return session.get(cls, spent.entity_id)
    return None


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
    ``done(result)`` gives the flash message and where to go. A :class:`OnceForm`
    is saved once only (:func:`once`); posted again it leads to ``done``'s page of
    the first result.
    """
    if request.method == "GET":
        return render(200, ())
    session = db_session()
    spend: Callable[[Any], None] | None = None
    if isinstance(form, OnceForm):
        def again(spent: SubmissionToken) -> str:
            row = saved_row(session, spent)
            # Gone since (deleted, rolled back by hand): the form's own page, drawn fresh.
            return done(row)[1] if row is not None else request.path

        spend = once(session, form, again)
    if not form.validate_on_submit():
        return render(422, ())
    try:
        result = save(session)
        if spend is not None:
            spend(result)
        session.commit()
    except ValidationFailed as exc:
        session.rollback()
        return render(422, apply_errors(form, exc))
    message, target = done(result)
    flash(message, "success")
    return redirect(target)
