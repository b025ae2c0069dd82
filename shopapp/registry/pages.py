"""The archive button every registry page has (customers, rotor types, rotors, machines)."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, TypeVar

from flask import redirect

from shopapp.core.extensions import db_session
from shopapp.core.forms import ConfirmForm
from shopapp.core.web import get_or_404, toggle_archive
from shopapp.models import Base

M = TypeVar("M", bound=Base)


def archive_button(
    model: type[M],
    ident: int,
    *,
    archive: Callable[..., Any],
    unarchive: Callable[..., Any],
    page: Callable[..., Any],
    done: Callable[[M, bool], str],
    target: str,
) -> Any:
    """Archive (or, with ``unarchive=1``, restore) the ``model`` row ``ident`` in one
    transaction; a refusal shows ``page(status=…, archive_error=…)`` again, success
    flashes ``done(row, restored)`` and goes to ``target``."""
    sess = db_session()
    obj = get_or_404(sess, model, ident)
    if not ConfirmForm().validate_on_submit():
        return page(status=400, archive_error="The form expired; try again.")
    refused = toggle_archive(
        sess, obj, archive=archive, unarchive=unarchive,
        on_refused=lambda msg: page(status=422, archive_error=msg),
        done=lambda restored: done(obj, restored),
    )
    return refused if refused is not None else redirect(target)
