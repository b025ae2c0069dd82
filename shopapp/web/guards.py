"""Checks every request passes before any view runs.

- Ids in URLs are bounded: ``<int:…>`` only matches 1 … 2³¹−1 (a PostgreSQL
  ``integer``), so ``/jobs/99999999999999999999`` is a plain 404, never a
  database overflow.
- Query and form values may not carry control characters (NUL and the other
  C0/C1 codes; tab, carriage return and newline are allowed in form text). A
  value with one is refused with a 400 page that names the field; nothing is
  stored. This is the one place for it, so every search box and text field is
  covered, logged in or not.
"""

from __future__ import annotations

import re
from typing import Any

from flask import Flask, abort, request
from werkzeug.routing import IntegerConverter

from shopapp.core.web import MAX_ID

_QUERY_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f]")
_FORM_CONTROL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f]")


def up_to_pattern(limit: int) -> str:
    """A regular expression for the whole numbers 1 … ``limit`` (no sign, no leading zero)."""
    digits = str(limit)
    parts = [rf"[1-9]\d{{0,{len(digits) - 2}}}"] if len(digits) > 1 else []
    for i, ch in enumerate(digits):
        low = 1 if i == 0 else 0
        if int(ch) > low:
            rest = len(digits) - i - 1
            parts.append(digits[:i] + f"[{low}-{int(ch) - 1}]" + (rf"\d{{{rest}}}" if rest else ""))
    parts.append(digits)
    return "(?:" + "|".join(parts) + ")"


class BoundedId(IntegerConverter):
    """``<int:…>`` for row ids: 1 … 2³¹−1, anything else does not match (404).

    The bound is in the pattern itself, not only in the conversion: a number that matches
    the pattern but fails conversion would make Werkzeug answer another method's rule on
    the same path with 405 instead of 404.
    """

    regex = up_to_pattern(MAX_ID)

    def __init__(self, map: Any, *args: Any, **kwargs: Any) -> None:
        kwargs.setdefault("min", 1)
        kwargs.setdefault("max", MAX_ID)
        super().__init__(map, *args, **kwargs)


def _first_bad(values: Any, pattern: re.Pattern[str]) -> str | None:
    for key, value in values.items(multi=True):
        if pattern.search(key) or (isinstance(value, str) and pattern.search(value)):
            return key
    return None


def register_guards(app: Flask) -> None:
    """Install the bounded id converter and the control-character check."""
    app.url_map.converters["int"] = BoundedId

    @app.before_request
    def _refuse_control_characters() -> None:
        bad = _first_bad(request.args, _QUERY_CONTROL)
        if bad is None and request.method in ("POST", "PUT", "PATCH") and not request.is_json:
            bad = _first_bad(request.form, _FORM_CONTROL)
        if bad is not None:
            shown = _QUERY_CONTROL.sub("?", bad)[:40]
            abort(400, description=f"The field {shown!r} contains a control character "
                                   "(such as NUL); type plain text and try again.")
