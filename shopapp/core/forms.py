"""Form fields every feature's forms share, the confirm-button form, and the one mapper
from a use-case's field errors to a form.

WTForms' FloatField takes "nan", "inf" and "1e999" as numbers, and Python's float
takes "1_5" as 15; a shop form must not, so :class:`NumberField` refuses them with a
message a person understands and reads a decimal comma without changing a magnitude.
"""

from __future__ import annotations

import datetime as dt
import math
import secrets
from collections.abc import Iterator
from typing import Any, TypeVar

from flask_wtf import FlaskForm
from wtforms import (
    DateField,
    Field,
    FieldList,
    FloatField,
    FormField,
    HiddenField,
    IntegerField,
    SelectField,
    StringField,
)
from wtforms.fields.choices import SelectChoice
from wtforms.validators import ValidationError
from wtforms.widgets import TextInput

from shopapp.balancing.numtext import short
from shopapp.core.checks import FORM_CONTROL, control_refusal, day_refusal, underflows_to_zero
from shopapp.core.errors import ValidationFailed
from shopapp.models import Base

M = TypeVar("M", bound=Base)

MAX_NUMBER_CHARS = 40


def _raw(valuelist: list[Any]) -> str | None:
    if not valuelist:
        return None
    raw = str(valuelist[0]).strip()
    return raw or None


def parse_number(raw: str, field: str = "") -> float:
    """A typed decimal number as a float, or ValueError with a message for the person.

    The one place a typed number is read, so a magnitude is never changed on the way:
    a decimal comma is read as a point ("1,5" is 1.5); anything a thousands separator
    could be part of is refused rather than guessed ("1,500", "1.234,5", "1,234.5",
    "1 500"), and so are Python's digit underscores ("1_5" would silently be 15).
    A non-zero number too small for a float ("1e-400") is refused, not read as 0;
    ``field`` (the field's label) names the field in that message.
    """
    if len(raw) > MAX_NUMBER_CHARS:
        raise ValueError(f"Too long for a number: at most {MAX_NUMBER_CHARS} characters.")
    if any(ch.isspace() for ch in raw) or "_" in raw:
        raise ValueError(f"Not a number: {raw!r}. Type it without spaces or separators "
                         "between the digits, e.g. 1500 or 1.5.")
    text = raw
    if "," in raw:
        whole, _, fraction = raw.partition(",")
        if "." in raw or "," in fraction:
            raise ValueError(f"{raw!r} has a thousands separator: type it with one decimal "
                             "point and no separators, e.g. 1234.5.")
        if len(fraction) == 3 and fraction.isdigit() and whole.lstrip("+-") not in ("", "0"):
            raise ValueError(f"{raw!r} could be {whole}.{fraction} or {whole}{fraction}: "
                             "type it with a decimal point, e.g. 1.5 or 1500.")
        text = f"{whole}.{fraction}"
    try:
        value = float(text)
    except ValueError:
        raise ValueError(f"Not a number: {raw!r}. Type digits, e.g. 12.5.") from None
    if not math.isfinite(value):
        raise ValueError(f"{raw!r} is not allowed: type a finite number, e.g. 12.5.")
    if underflows_to_zero(text, value):
        subject = f"{field}: " if field else ""
        raise ValueError(f"{subject}{raw!r} is too small to represent (it would be stored "
                         "as 0); type 0 for zero or use a larger unit.")
    return value


def _with_inputmode(kwargs: dict[str, Any], mode: str) -> dict[str, Any]:
    kwargs["render_kw"] = {"inputmode": mode, **(kwargs.get("render_kw") or {})}
    return kwargs


class NumberField(FloatField):
    """A decimal number; empty is None; NaN, infinity and ambiguous separators are refused
    (:func:`parse_number`).

    Drawn as a text input with a decimal keypad, not ``type="number"``: a browser's
    number input drops what its locale does not parse ("41,5" became 415 in an English
    browser, "abc" arrived empty), so the server never saw what was typed.
    """

    widget = TextInput()

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **_with_inputmode(kwargs, "decimal"))

    def process_formdata(self, valuelist: list[Any]) -> None:
        raw = _raw(valuelist)
        self.data = None
        if raw is None:
            return
        self.data = self.check(raw, parse_number(raw, str(self.label.text).strip()))

    def check(self, raw: str, value: float) -> float:
        """Hook for a subclass's range; returns the value kept."""
        return value

    def _value(self) -> str:
        if self.raw_data:
            return str(self.raw_data[0])
        return "" if self.data is None else short(self.data, 12)


class AngleField(NumberField):
    """An angle as the machine or the rotor shows it, 0–360°; anything else is refused.

    Never wrapped: 400° is more likely a slip than "a turn and 40°", and a wrapped
    angle would put a mass in the wrong place.
    """

    def check(self, raw: str, value: float) -> float:
        refusal = angle_refusal(raw, value)
        if refusal is not None:
            raise ValueError(refusal)
        return value


def angle_refusal(raw: str, value: float) -> str | None:
    """Why a typed angle is refused (outside 0–360°, see :class:`AngleField`), or None.
    For forms that read angles as text and check them themselves."""
    if 0.0 <= value <= 360.0:
        return None
    return (f"{raw}° is outside 0–360°: type the angle as shown (it is not wrapped to "
            f"{short(value % 360.0)}° for you).")


class WholeNumberField(IntegerField):
    """A whole number; empty is None; decimals, junk and more than 9 digits are refused.
    A text input with a numeric keypad, for the reason given at :class:`NumberField`."""

    widget = TextInput()

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **_with_inputmode(kwargs, "numeric"))

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


class DayField(DateField):
    """A date (YYYY-MM-DD) inside the shop's date window (:func:`shopapp.core.checks.day_refusal`):
    not before 1990, not after today unless ``ahead_days`` allows it."""

    def __init__(self, *args: Any, ahead_days: int = 0, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self.ahead_days = ahead_days

    def pre_validate(self, form: Any) -> None:
        super().pre_validate(form)
        if isinstance(self.data, dt.date):
            refusal = day_refusal(self.data, ahead_days=self.ahead_days)
            if refusal is not None:
                raise ValidationError(refusal)


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
        self.invalid_choice_message = _not_a_choice(self)
        super().pre_validate(form)


def _not_a_choice(field: Any) -> str:
    """"Not one of the choices; choose one of: …" with ``field``'s choices (the first 12),
    or that there is nothing to choose yet."""
    # A placeholder ("— choose —") is not a choice to offer in the message.
    labels = [str(c.label) for c in field.iter_choices() if not str(c.label).startswith("—")]
    shown = ", ".join(labels[:12]) + (", …" if len(labels) > 12 else "")
    return (f"Not one of the choices; choose one of: {shown}." if labels
            else "Not one of the choices: there is nothing to choose from here yet.")


class ShopForm(FlaskForm):
    """The base of every form: WTForms' stock messages name their field
    (:func:`stock_message_named`), and a field whose typed value holds a control character
    is refused beside it, with what was typed kept in the form. The request guard lets such
    a post reach its view for this (and stops any write, :mod:`shopapp.web.guards`)."""

    def validate(self, extra_validators: Any = None) -> bool:
        valid = super().validate(extra_validators)
        for leaf in _leaf_fields(self):
            leaf.errors = [stock_message_named(leaf, e) for e in leaf.errors]
        for field in self:
            found = next((m for v in field.raw_data or () if isinstance(v, str)
                          for m in [FORM_CONTROL.search(v)] if m), None)
            if found:
                # The one message for the field: a number field's "not a number" about
                # the same characters would only repeat it.
                field.errors = [f"{field.label.text} {control_refusal(found.group())}."]
                valid = False
        return valid


def _field_name(field: Field) -> str:
    """The words that name ``field`` in a message: its label, or its name where the label
    is a question ("Why is this run struck out?") or empty."""
    label = str(field.label.text).strip().rstrip(":")
    if not label or label.endswith("?"):
        label = field.short_name.replace("_", " ").capitalize()
    return label


# WTForms' own messages say "Field ..." or nothing of the field at all; these are the ones
# shop forms meet (Length, DataRequired/InputRequired, DateField, SelectField).
_STOCK_REQUIRED = "This field is required."
_STOCK_NOT_A_DATE = "Not a valid date value."
_STOCK_NOT_A_CHOICE = ("Not a valid choice.", "Invalid Choice: could not coerce.")


def stock_message_named(field: Field, message: str) -> str:
    """One of WTForms' stock messages as the field's own: "Field cannot be longer than 200
    characters." beside the contact reads "Contact person cannot be longer than 200
    characters (10000 typed)."; any other message is returned unchanged."""
    name = _field_name(field)
    if message == _STOCK_REQUIRED:
        return f"{name} is required."
    if message == _STOCK_NOT_A_DATE:
        return f"{name}: not a date; type it as YYYY-MM-DD, e.g. 2026-11-03."
    if message in _STOCK_NOT_A_CHOICE:
        refusal = _not_a_choice(field)
        return f"{name}: {refusal[:1].lower()}{refusal[1:]}"
    if message.startswith("Field ") and "character" in message:
        text = f"{name} {message.removeprefix('Field ')}"
        if "longer than" in message and isinstance(field.data, str):
            text = f"{text.removesuffix('.')} ({len(field.data)} typed)."
        return text
    return message


def _leaf_fields(fields: Any) -> Iterator[Field]:
    """Every field among ``fields`` (a form, or a list of fields) that holds its own
    messages: the fields inside a sub-form (``FormField``) or a list of entries
    (``FieldList``), not the container, whose messages are read-only."""
    for field in fields:
        if isinstance(field, FormField):
            yield from _leaf_fields(field.form)
        elif isinstance(field, FieldList):
            yield from _leaf_fields(field.entries)
        else:
            yield field


# The first words of a bare predicate, which takes the field's label as its subject.
_PREDICATE_STARTS = frozenset({
    "is", "are", "must", "may", "cannot", "can", "has", "have", "contains", "needs",
    "should", "was", "were", "does", "adds", "holds", "differs", "lies", "exceeds", "would",
})


def field_message(field: Field, message: str) -> str:
    """A use-case's message as shown beside ``field``, naming its field: a bare predicate
    ("is required", "must be a number, got 'x'") gets the field's label as its subject
    ("Reason is required"); a clause of its own ("give the unbalance or the eccentricity",
    "at most 20 readings") follows the label after a colon; a whole sentence is kept."""
    if not message[:1].islower():
        return message
    if message.split(" ", 1)[0] in _PREDICATE_STARTS:
        return f"{_field_name(field)} {message}"
    return f"{_field_name(field)}: {message}"


def apply_errors(form: FlaskForm, exc: ValidationFailed,
                 mapping: dict[str, Any] | None = None) -> list[str]:
    """Put a use-case's field messages beside the form's fields (the one error mapper).

    ``mapping`` names the form field for a service field where the names differ;
    otherwise ``rotor_type_id`` / ``customer_id`` also map to ``rotor_type`` /
    ``customer``. Returns the messages for which the form has no field (shown
    above the form).
    """
    # A prefixed form (``run-speed_rpm``) is matched by the field's own name too: the
    # use-cases name their fields without the page's prefix.
    fields = {**{f.short_name: f for f in form}, **{f.name: f for f in form}}
    loose: list[str] = []
    for name, message in exc.errors.items():
        field = (mapping or {}).get(name)
        if field is None:
            field = fields.get(name) or fields.get(name.removesuffix("_id"))
        if isinstance(field, Field) and not isinstance(field, HiddenField):
            field.errors = [*field.errors, field_message(field, message)]
        elif isinstance(field, HiddenField):
            # A hidden field shows no message: name what it stands for above the form
            # ("run", not "run id").
            loose.append(f"{name.removesuffix('_id').replace('_', ' ')}: {message}")
        else:
            loose.append(f"{name.replace('_', ' ')}: {message}")
    return loose


def hidden_field_errors(form: FlaskForm) -> list[str]:
    """The messages of ``form``'s hidden fields, for above the form: a hidden field shows
    none beside it, so a tampered one (a control character, say) would leave the page
    refused without a word. Named as :func:`apply_errors` names them ("run", not "run id")."""
    return [f"{f.short_name.removesuffix('_id').replace('_', ' ')}: {m}"
            for f in form if isinstance(f, HiddenField) for m in f.errors]


def new_form_token() -> str:
    """A fresh one-time token for a create form (32 URL-safe characters)."""
    return secrets.token_urlsafe(24)


class FormTokenField(HiddenField):
    """The one-time token: drawn fresh with the form; a post without one has none
    (WTForms would otherwise fall back to a fresh default and let it through)."""

    def process_formdata(self, valuelist: list[Any]) -> None:
        self.data = str(valuelist[0]) if valuelist else None


class OnceForm(ShopForm):
    """A create form: it carries a one-time token, issued when the form is drawn.

    The token is spent in the transaction that saves what the form creates
    (:func:`shopapp.core.web.once`); the same form posted again (back button, double
    click) saves nothing and leads to what the first post saved. ``hidden_tag()``
    draws it with the CSRF token.
    """

    form_token = FormTokenField(default=new_form_token)


class ConfirmForm(ShopForm):
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
        return "" if not self.data else ", ".join(short(v, 12) for v in self.data)
