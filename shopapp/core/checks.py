"""Field checks shared by the services: collect every bad field, then raise once.

``Errors`` gathers field → message; ``number``/``text``/``date`` turn raw input
(strings from a form, numbers from code) into values or record why not, in the
shop's words, so a page can show each message beside its field.
"""

from __future__ import annotations

import datetime as dt
import math
from typing import Any

from shopapp.core.errors import ValidationFailed

MAX_TEXT = 5000


class Errors(dict[str, str]):
    """Field → first message for that field."""

    def add(self, field: str, message: str) -> None:
        self.setdefault(field, message)

    def raise_if_any(self) -> None:
        if self:
            first = next(iter(self))
            raise ValidationFailed(first, self[first], errors=dict(self))


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
    elif above is not None and out <= above:
        e.add(field, f"must be greater than {above:g}{suffix}, got {out:g}")
    elif minimum is not None and out < minimum:
        e.add(field, f"must not be below {minimum:g}{suffix}, got {out:g}")
    elif maximum is not None and out > maximum:
        e.add(field, f"must be at most {maximum:g}{suffix}, got {out:g}")
    else:
        return out
    return None


def text(e: Errors, field: str, value: Any, *, max_len: int = MAX_TEXT,
          required: bool = False) -> str:
    text = "" if value is None else str(value).strip()
    if required and not text:
        e.add(field, "is required")
    elif len(text) > max_len:
        e.add(field, f"is too long: {len(text)} characters, at most {max_len}")
    elif any(ord(ch) < 32 and ch not in "\n\r\t" for ch in text):
        e.add(field, "contains control characters; type plain text")
    return text


def date(e: Errors, field: str, value: Any, *, not_after: dt.date | None = None
          ) -> dt.date | None:
    if not isinstance(value, dt.date) or isinstance(value, dt.datetime):
        e.add(field, "is required (a date)")
        return None
    if not_after is not None and value > not_after:
        e.add(field, f"{value.isoformat()} is in the future")
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
