"""Form fields and view helpers shared by the registry (customers, rotors, machines) and admin.

WTForms' FloatField takes "nan", "inf" and "1e999" as numbers; a shop form must
not, so :class:`NumberField` refuses them with a message a person understands.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any, TypeVar

from flask import abort, current_app, flash, request, url_for
from flask_login import current_user
from flask_wtf import FlaskForm
from sqlalchemy.orm import Session
from werkzeug.routing import BuildError
from wtforms import Field, FloatField, IntegerField, SelectField
from wtforms.fields.choices import SelectChoice

from shopapp.models import Base
from shopapp.services.errors import ValidationFailed

M = TypeVar("M", bound=Base)

MAX_NUMBER_CHARS = 40


def _raw(valuelist: list[Any]) -> str | None:
    if not valuelist:
        return None
    raw = str(valuelist[0]).strip()
    return raw or None


class NumberField(FloatField):
    """A decimal number; empty is None; NaN, infinity, commas and junk are refused."""

    def process_formdata(self, valuelist: list[Any]) -> None:
        raw = _raw(valuelist)
        self.data = None
        if raw is None:
            return
        if len(raw) > MAX_NUMBER_CHARS:
            raise ValueError(f"Not a number: at most {MAX_NUMBER_CHARS} characters.")
        if "," in raw:
            raise ValueError("Use a point as the decimal separator, e.g. 12.5 (no commas).")
        try:
            value = float(raw)
        except ValueError:
            raise ValueError(f"Not a number: {raw!r}. Type digits, e.g. 12.5.") from None
        if not math.isfinite(value):
            raise ValueError(f"{raw!r} is not allowed: type a finite number, e.g. 12.5.")
        self.data = value

    def _value(self) -> str:
        if self.raw_data:
            return str(self.raw_data[0])
        return "" if self.data is None else f"{self.data:g}"


class WholeNumberField(IntegerField):
    """A whole number; empty is None; decimals, junk and more than 9 digits are refused."""

    def process_formdata(self, valuelist: list[Any]) -> None:
        raw = _raw(valuelist)
        self.data = None
        if raw is None:
            return
        digits = raw.lstrip("+-")
        if not digits.isdigit() or not digits.isascii():
            raise ValueError(f"Not a whole number: {raw[:40]!r}. Type digits, e.g. 12.")
        if len(digits) > 9:
            raise ValueError("Too large: at most 9 digits.")
        self.data = int(raw)


def _select_choices(value: Any) -> Any:
    """``(value, label)`` pairs as ``SelectChoice``; callables and None unchanged."""
    if value is None or callable(value) or isinstance(value, dict):
        return value
    out = []
    for item in value:
        if isinstance(item, SelectChoice):
            out.append(item)
        elif isinstance(item, tuple):
            out.append(SelectChoice(item[0], item[1] if len(item) > 1 else None))
        else:
            out.append(SelectChoice(item))
    return out


class ChoiceField(SelectField):
    """A select whose refusal says which choices are allowed.

    Choices may be given as ``(value, label)`` pairs; they are stored as
    WTForms' ``SelectChoice`` (plain tuples are deprecated in WTForms 3.3).
    """

    def __init__(self, *args: Any, choices: Any = None, **kwargs: Any) -> None:
        super().__init__(*args, choices=_select_choices(choices), **kwargs)

    @property  # type: ignore[override]
    def choices(self) -> Any:
        return SelectField.choices.fget(self)  # type: ignore[attr-defined]

    @choices.setter
    def choices(self, value: Any) -> None:
        SelectField.choices.fset(self, _select_choices(value))  # type: ignore[attr-defined]

    def pre_validate(self, form: Any) -> None:
        labels = [str(c.label) for c in self.iter_choices()]
        shown = ", ".join(labels[:12]) + (", …" if len(labels) > 12 else "")
        self.invalid_choice_message = f"Not one of the choices; choose one of: {shown}."
        super().pre_validate(form)


def apply_errors(form: FlaskForm, exc: ValidationFailed) -> list[str]:
    """Put a service's field messages beside the form's fields.

    Returns the messages for which the form has no field (shown above the form).
    ``rotor_type_id`` / ``customer_id`` map to ``rotor_type`` / ``customer`` too.
    """
    loose: list[str] = []
    for name, message in exc.errors.items():
        field: Field | None = getattr(form, name, None)
        if field is None and name.endswith("_id"):
            field = getattr(form, name.removesuffix("_id"), None)
        if isinstance(field, Field):
            field.errors = [*field.errors, message]
        else:
            loose.append(f"{name.replace('_', ' ')}: {message}")
    return loose


def get_or_404(session: Session, model: type[M], ident: int) -> M:
    """The row of ``model`` with this id, or a 404 page."""
    obj = session.get(model, ident)
    if obj is None:
        abort(404, description=f"No {model.__name__} with id {ident}.")
    return obj


def page_size() -> int:
    return int(current_app.config.get("PAGE_SIZE", 25))


def job_url(job: Any) -> str | None:
    """Link to a job's page once the jobs area exists (None before that)."""
    if "jobs.detail" not in current_app.view_functions:
        return None
    for kwargs in ({"job_id": job.id}, {"number": job.number}, {"id": job.id}):
        try:
            return url_for("jobs.detail", **kwargs)
        except BuildError:
            continue
    return None


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
        (unarchive if restore else archive)(session, obj, by=current_user._get_current_object())
        session.commit()
    except ValidationFailed as exc:
        session.rollback()
        return on_refused(exc.errors.get(exc.field, exc.message))
    flash(done(restore), "success")
    return None
