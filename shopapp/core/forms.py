"""Form fields every feature's forms share, the confirm-button form, and the one mapper
from a use-case's field errors to a form.

WTForms' FloatField takes "nan", "inf" and "1e999" as numbers; a shop form must
not, so :class:`NumberField` refuses them with a message a person understands.
"""

from __future__ import annotations

import math
from typing import Any, TypeVar

from flask_wtf import FlaskForm
from wtforms import Field, FloatField, IntegerField, SelectField, StringField
from wtforms.fields.choices import SelectChoice

from shopapp.core.errors import ValidationFailed
from shopapp.models import Base

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

    @property
    def choices(self) -> Any:
        return SelectField.choices.fget(self)

    @choices.setter
    def choices(self, value: Any) -> None:
        SelectField.choices.fset(self, _select_choices(value))

    def pre_validate(self, form: Any) -> None:
        labels = [str(c.label) for c in self.iter_choices()]
        shown = ", ".join(labels[:12]) + (", …" if len(labels) > 12 else "")
        self.invalid_choice_message = f"Not one of the choices; choose one of: {shown}."
        super().pre_validate(form)


def apply_errors(form: FlaskForm, exc: ValidationFailed,
                 mapping: dict[str, Any] | None = None) -> list[str]:
    """Put a use-case's field messages beside the form's fields (the one error mapper).

    ``mapping`` names the form field for a service field where the names differ;
    otherwise ``rotor_type_id`` / ``customer_id`` also map to ``rotor_type`` /
    ``customer``. Returns the messages for which the form has no field (shown
    above the form).
    """
    fields = {f.name: f for f in form}
    loose: list[str] = []
    for name, message in exc.errors.items():
        field = (mapping or {}).get(name)
        if field is None:
            field = fields.get(name) or fields.get(name.removesuffix("_id"))
        if isinstance(field, Field):
            field.errors = [*field.errors, message]
        else:
            loose.append(f"{name.replace('_', ' ')}: {message}")
    return loose


class ConfirmForm(FlaskForm):
    """An empty form: a POST button with its CSRF token (archive, unarchive, confirm)."""


class NumberListField(StringField):
    """A list of decimal numbers typed as ``2, 5, 10`` (commas or spaces between them);
    empty is None. Each item is refused like :class:`NumberField` refuses a number."""

    def process_formdata(self, valuelist: list[Any]) -> None:
        raw = _raw(valuelist)
        self.data = None
        if raw is None:
            return
        if len(raw) > 20 * MAX_NUMBER_CHARS:
            raise ValueError(f"Too long: at most {20 * MAX_NUMBER_CHARS} characters.")
        values = []
        for item in raw.replace(",", " ").replace(";", " ").split():
            try:
                value = float(item)
            except ValueError:
                raise ValueError(f"Not a number: {item[:MAX_NUMBER_CHARS]!r}. Type numbers "
                                 "separated by commas, e.g. 2, 5, 10.") from None
            if not math.isfinite(value):
                raise ValueError(f"{item!r} is not allowed: type finite numbers, e.g. 2, 5, 10.")
            values.append(value)
        self.data = values

    def _value(self) -> str:
        if self.raw_data:
            return str(self.raw_data[0])
        return "" if not self.data else ", ".join(f"{v:g}" for v in self.data)
