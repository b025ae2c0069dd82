"""Field checks shared by the services: collect every bad field, then raise once.

``Errors`` gathers field → message; ``number``/``text``/``date`` turn raw input
(strings from a form, numbers from code) into values or record why not, in the
shop's words, so a page can show each message beside its field.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from typing import Any

from shopapp.balancing.numtext import short
from shopapp.core.clock import shop_today
from shopapp.core.errors import ValidationFailed

MAX_TEXT = 5000
# Largest size of a number typed or computed (ours): the heaviest rotor at the largest
# radius is about 10^9 g·mm, so 10^12 is never a real figure, and it stays far from float
# overflow (a sum or a square of such figures still fits a double and a JSON number).
MAX_DERIVED = 1e12
TOO_LARGE = "is beyond any real figure (more than a million million)"


class Errors(dict[str, str]):
    """Field → first message for that field."""

    def add(self, field: str, message: str) -> None:
        self.setdefault(field, message)

    def raise_if_any(self) -> None:
        if self:
            first = next(iter(self))
            raise ValidationFailed(first, self[first], errors=dict(self))


def underflows_to_zero(text: str, value: float) -> bool:
    """Whether a typed non-zero number was read as 0 (``"1e-400"``: below the smallest
    double, about 4.9e-324); a typed zero ("0", "-0", "0.0e5") is not."""
    return value == 0.0 and any(ch in "123456789" for ch in text.lower().partition("e")[0])


def number(e: Errors, field: str, value: Any, *, required: bool = True,
         above: float | None = None, minimum: float | None = None, maximum: float | None = None,
         unit: str = "") -> float | None:
    if value is None or (isinstance(value, str) and not value.strip()):
        if required:
            e.add(field, "is required")
        return None
    if isinstance(value, bool):
        e.add(field, f"must be a number, got {value!r}")
        return None
    try:
        out = float(value)
    except (TypeError, ValueError, OverflowError):
        e.add(field, f"must be a number, got {str(value)[:40]!r}")
        return None
    suffix = f" {unit}" if unit else ""
    if not math.isfinite(out):
        e.add(field, f"must be a finite number, got {str(value)[:40]!r}")
    elif isinstance(value, str) and underflows_to_zero(value, out):
        e.add(field, f"is too small to represent, got {value[:40]!r} (it would be stored as 0)")
    elif above is not None and out <= above:
        e.add(field, f"must be greater than {short(above)}{suffix}, got {short(out)}")
    elif minimum is not None and out < minimum:
        e.add(field, f"must not be below {short(minimum)}{suffix}, got {short(out)}")
    elif maximum is not None and out > maximum:
        e.add(field, f"must be at most {short(maximum)}{suffix}, got {short(out)}")
    elif abs(out) > MAX_DERIVED:
        # No shop quantity comes near it; products of such inputs overflow to infinity.
        e.add(field, f"{TOO_LARGE}; check for a typing error")
    else:
        return out
    return None


#: Text-direction embeddings, overrides and isolates (U+202A–U+202E, U+2066–U+2069): typed
#: into a serial or a reason they turn the page's own text around them backwards.
BIDI_CONTROL = "\u202a-\u202e\u2066-\u2069"
#: Control characters (C0 and C1, and the text-direction controls) a typed form value may
#: not hold; tab, carriage return and newline are allowed in form text. Checked by the
#: request guard and every form.
FORM_CONTROL = re.compile(f"[\\x00-\\x08\\x0b\\x0c\\x0e-\\x1f\\x7f-\\x9f{BIDI_CONTROL}]")
TEXT_CONTROL = re.compile(f"[\\x00-\\x08\\x0b\\x0c\\x0e-\\x1f{BIDI_CONTROL}]")
_BIDI = re.compile(f"[{BIDI_CONTROL}]")


def control_character_named(character: str) -> str:
    """A control character as a person can look it up: its code point and kind
    ("U+202E, a text-direction control", "U+0000, NUL", "U+0007, a control code")."""
    kind = ("a text-direction control" if _BIDI.match(character)
            else "NUL" if character == "\x00" else "a control code")
    return f"U+{ord(character):04X}, {kind}"


def control_refusal(character: str) -> str:
    """What follows a field's name when its value holds ``character``."""
    return (f"contains a control character ({control_character_named(character)}); "
            "type plain text and try again")


def text(e: Errors, field: str, value: Any, *, max_len: int = MAX_TEXT,
          required: bool = False) -> str:
    text = "" if value is None else str(value).strip()
    if required and not text:
        e.add(field, "is required")
    elif len(text) > max_len:
        e.add(field, f"is too long: {len(text)} characters, at most {max_len}")
    elif TEXT_CONTROL.search(text):
        e.add(field, "contains control characters; type plain text")
    return text


# The date window (ours): no rotor of a shop using shopapp was received, tested or
# certified before 1990, and a day may lie ahead of today only where the future makes
# sense. Every date input (form, query string, CLI option, use-case) is held to it here.
EARLIEST_DAY = dt.date(1990, 1, 1)
QUERY_AHEAD_DAYS = 366  # a list or dashboard may look at a period reaching into next year
PROMISE_AHEAD_DAYS = 3 * 366  # a promised date: about three years ahead at most


def day_refusal(value: dt.date, *, ahead_days: int = 0, today: dt.date | None = None
                ) -> str | None:
    """Why ``value`` lies outside the date window, or None when it is inside.

    The window is :data:`EARLIEST_DAY` .. ``today + ahead_days`` (0: nothing after today).
    """
    if value < EARLIEST_DAY:
        return (f"{value.isoformat()} is before {EARLIEST_DAY.isoformat()}, the earliest "
                "date shopapp takes")
    latest = (today or shop_today()) + dt.timedelta(days=ahead_days)
    if value > latest:
        if ahead_days == 0:
            return f"{value.isoformat()} is in the future (today is {latest.isoformat()})"
        return f"{value.isoformat()} is too far ahead: at most {latest.isoformat()}"
    return None


def date(e: Errors, field: str, value: Any, *, not_after: dt.date | None = None,
         ahead_days: int = 0, today: dt.date | None = None, required: bool = True
         ) -> dt.date | None:
    """``value`` as a date inside the date window (:func:`day_refusal`), or None.

    The latest day is ``not_after`` when given, else ``today + ahead_days`` (``today``
    defaults to :func:`shopapp.core.clock.shop_today`).
    """
    if value is None and not required:
        return None
    if not isinstance(value, dt.date) or isinstance(value, dt.datetime):
        e.add(field, "is required (a date)")
        return None
    if not_after is not None:
        refusal = day_refusal(value, today=not_after)
    else:
        refusal = day_refusal(value, ahead_days=ahead_days, today=today)
    if refusal is not None:
        e.add(field, refusal)
        return None
    return value


def integer(e: Errors, field: str, value: Any, *, minimum: int, maximum: int,
            required: bool = True) -> int | None:
    """``value`` as a whole number in ``[minimum, maximum]``, or None (and a message in ``e``)."""
    if value is None or (isinstance(value, str) and not value.strip()):
        if required:
            e.add(field, "is required")
        return None
    out = number(e, field, value, required=required)
    if out is None:
        return None
    if not out.is_integer():
        e.add(field, f"must be a whole number, got {value!s:.40}")
        return None
    whole = int(out)
    if not minimum <= whole <= maximum:
        e.add(field, f"must be between {minimum} and {maximum}, got {whole}")
        return None
    return whole


def choice(e: Errors, field: str, value: Any, allowed: tuple[str, ...], *,
           required: bool = True) -> str | None:
    """``value`` when it is one of ``allowed``; the message lists the choices."""
    if value is None or (isinstance(value, str) and not value.strip()):
        if required:
            e.add(field, f"is required; choose one of {', '.join(allowed)}")
        return None
    if value not in allowed:
        e.add(field, f"{str(value)[:40]!r} is not allowed; choose one of {', '.join(allowed)}")
        return None
    return str(value)


def _bad_number(value: Any, maximum: float) -> str | None:
    """Why ``value`` (a number, or a list/dict of them as in a JSON column) cannot be stored."""
    if isinstance(value, bool) or value is None or isinstance(value, str | int):
        return None
    if isinstance(value, float):
        if not math.isfinite(value):
            return "is not a finite number"
        if abs(value) > maximum:
            return TOO_LARGE
        return None
    items = value.values() if isinstance(value, dict) else value
    if isinstance(items, list | tuple) or isinstance(value, dict):
        for item in items:
            why = _bad_number(item, maximum)
            if why is not None:
                return why
    return None


def derived(values: dict[str, Any], *, maximum: float = MAX_DERIVED) -> None:
    """Refuse to store computed figures that are NaN, infinite or absurdly large.

    ``values``: field → float, None, or a list/dict of them (a JSON column). Raises
    :class:`ValidationFailed` naming every bad field: such a figure comes from an input
    far out of range (a typing error), and storing it would break later sums, the
    PostgreSQL JSON type and every page that shows it.
    """
    e = Errors()
    for field, value in values.items():
        why = _bad_number(value, maximum)
        if why is not None:
            e.add(field, f"the inputs give a {field.replace('_', ' ')} that {why}; "
                  "check the readings and masses for a value typed far too large")
    e.raise_if_any()


def derived_row(row: Any, *, maximum: float = MAX_DERIVED) -> None:
    """:func:`derived` over every column of an ORM row about to be stored."""
    derived({c.key: getattr(row, c.key, None) for c in row.__table__.columns}, maximum=maximum)


def plain_digits(text: str) -> bool:
    """Only the ASCII digits 0-9. ``str.isdigit()`` is also true for "³" or "١", which
    ``int()`` refuses (a 500 found by tests/web/test_fuzz.py)."""
    return text.isascii() and text.isdigit()
