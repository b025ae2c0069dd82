"""What every registry page has (customers, rotor types, rotors, machines): the archive
button, and edit forms that know the record they were drawn on."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any, TypeVar

from flask import redirect, request
from flask_wtf import FlaskForm

from shopapp.core.extensions import db_session
from shopapp.core.forms import ConfirmForm
from shopapp.core.web import get_or_404, toggle_archive
from shopapp.models import Base
from shopapp.registry.common import changed_since, edit_conflict, edit_stamp

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


def drawn_on_record(render: Callable[[int, Sequence[str]], Any], form: FlaskForm, obj: Base,
                    fields: Sequence[str], *, entity: str) -> Callable[[int, Sequence[str]], Any]:
    """``render`` for :func:`shopapp.core.web.submit_form` that draws the edit form with the
    stamp of ``obj`` as stored now (its hidden ``drawn`` field). Drawn again after a save
    was refused, a form whose record someone else saved meanwhile says so (which fields)
    before it takes the new stamp: saving it again is then a decision, never a silent
    overwrite (:func:`shopapp.registry.common.refuse_if_changed`)."""

    def page(status: int, loose: Sequence[str]) -> Any:
        posted = form.drawn.data if request.method == "POST" else None  # type: ignore[attr-defined]
        if posted:
            changed = changed_since(obj, fields, posted)
            note = f"{entity}: {edit_conflict(changed)}"
            if changed and note not in loose:
                loose = [*loose, note]
        form.drawn.data = edit_stamp(obj, fields)  # type: ignore[attr-defined]
        return render(status, loose)

    return page
