"""Checks every request passes before any view runs.

- Ids in URLs are bounded: ``<int:…>`` only matches 1 … 2³¹−1 (a PostgreSQL
  ``integer``), so ``/jobs/99999999999999999999`` is a plain 404, never a
  database overflow.
- Query and form values may not carry control characters (NUL and the other
  C0/C1 codes; tab, carriage return and newline are allowed in form text).
  An API request or a download with one in its query, or an API post, is
  refused with a 400 that names the field. A page asked for with one in its
  query is drawn without that field, the refusal naming it above the page
  (422). A page's form post reaches its view, so the form is drawn again
  with what was typed and the refusal beside the field (every form is a
  :class:`~shopapp.core.forms.ShopForm`); the request cannot write: a flush
  during it raises the same 400 (a view that saved without its form, or a
  control character in a value no form field reads). This is the one place for
  it, so every search box and text field is covered, logged in or not.
"""

from __future__ import annotations

import re
from typing import Any

from flask import Flask, Response, abort, current_app, g, has_request_context, request
from sqlalchemy import event
from sqlalchemy.orm import Session
from werkzeug.datastructures import ImmutableMultiDict
from werkzeug.exceptions import BadRequest
from werkzeug.routing import IntegerConverter

from shopapp.core.checks import BIDI_CONTROL, FORM_CONTROL, control_character_named
from shopapp.core.web import MAX_ID

_QUERY_CONTROL = re.compile(f"[\\x00-\\x1f\\x7f-\\x9f{BIDI_CONTROL}]")


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


def _bad_character(key: str, value: Any, pattern: re.Pattern[str]) -> str | None:
    """The first character ``pattern`` refuses in a field's name or value."""
    found = pattern.search(key) or (isinstance(value, str) and pattern.search(value))
    return found.group() if found else None


def _first_bad(values: Any, pattern: re.Pattern[str]) -> tuple[str, str] | None:
    """The first field holding a character ``pattern`` refuses, and that character."""
    for key, value in values.items(multi=True):
        character = _bad_character(key, value, pattern)
        if character is not None:
            return key, character
    return None


def _refusal(field: str, character: str, *, left_out: bool = False) -> str:
    """The message naming the field and the character found in it (its code point and
    kind: a NUL, another control code, or a text-direction control)."""
    shown = _QUERY_CONTROL.sub("?", field)[:40]
    what = ", so it was left out of this page" if left_out else ""
    return (f"The field {shown!r} contains a control character "
            f"({control_character_named(character)}){what}; type plain text and try again.")


def _leave_out_query_fields() -> None:
    """A page asked for with a control character in its query: the fields holding one
    are left out and the page says so above its content (``g.query_refusals``), rather
    than a whole-page 400 that loses the page. A search box or filter reads as empty."""
    kept, refused = [], {}
    for key, value in request.args.items(multi=True):
        character = _bad_character(key, value, _QUERY_CONTROL)
        if character is not None:
            refused.setdefault(key, character)
        else:
            kept.append((key, value))
    # Werkzeug's cached property takes the replacement; every view reads this one.
    request.args = ImmutableMultiDict(kept)  # type: ignore[misc]
    g.query_refusals = [_refusal(key, ch, left_out=True) for key, ch in refused.items()]


def _refuse_query_outside_pages(response: Response) -> Response:
    """A download (PDF, CSV, ZIP) cannot show the message: it is refused as before, so
    it is never answered for other values than those asked for."""
    refusals = g.get("query_refusals")
    if not refusals:
        return response
    if response.mimetype != "text/html":
        return current_app.make_response(
            current_app.handle_http_exception(BadRequest(description=refusals[0])))
    if response.status_code == 200:
        response.status_code = 422  # as a GET form with a refused value answers
    return response


def _no_write_with_control_characters(session: Session, *_: Any) -> None:
    """before_flush: a form post holding a control character writes nothing."""
    if has_request_context() and "control_character_field" in g:
        raise BadRequest(description=_refusal(*g.control_character_field))


def register_guards(app: Flask) -> None:
    """Install the bounded id converter and the control-character check."""
    app.url_map.converters["int"] = BoundedId
    if not event.contains(Session, "before_flush", _no_write_with_control_characters):
        event.listen(Session, "before_flush", _no_write_with_control_characters)

    @app.before_request
    def _refuse_control_characters() -> None:
        bad = _first_bad(request.args, _QUERY_CONTROL)
        if bad is not None:
            if request.method != "GET" or "api" in request.blueprints:
                abort(400, description=_refusal(*bad))
            _leave_out_query_fields()
        if request.method in ("POST", "PUT", "PATCH") and not request.is_json:
            bad = _first_bad(request.form, FORM_CONTROL)
            if bad is None:
                return
            if "api" in request.blueprints:  # the JSON API answers 400 with the field named
                abort(400, description=_refusal(*bad))
            # The view draws its form again with the refusal beside the field.
            g.control_character_field = bad

    app.after_request(_refuse_query_outside_pages)
