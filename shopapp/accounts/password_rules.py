"""What a new password must not be: too short, only blanks, the username or a trivial
variant of it, or one of the most used passwords (or one with digits and symbols added).

Every rule gives a message for the ``password`` field in the shop's words. The common
list is shipped beside this module (``common_passwords.txt``, see
``scripts/make_common_passwords.py`` for where it comes from).
"""

from __future__ import annotations

import functools
import re
from importlib import resources

MIN_PASSWORD_LENGTH = 8
MAX_PASSWORD_LENGTH = 200

# Digits, punctuation, blanks and '_' at either end: "Password123!" → "password".
_DECORATION = re.compile(r"^[\W\d_]+|[\W\d_]+$")
_LEADING = re.compile(r"^[\W\d_]+")
_TRAILING = re.compile(r"[\W\d_]+$")
_NOT_ALNUM = re.compile(r"[^a-z0-9]")
# Digits or symbols cut from each end when looking a password up in the common list.
MAX_TRIM = 8
# Parts of a username ("otto.spinwell") shorter than this are not refused on their own.
MIN_NAME_PART = 4


@functools.cache
def common_passwords() -> frozenset[str]:
    """The shipped list of common passwords (lower case)."""
    text = resources.files("shopapp.accounts").joinpath("common_passwords.txt").read_text(
        encoding="utf-8"
    )
    return frozenset(
        line.strip() for line in text.splitlines() if line.strip() and not line.startswith("#")
    )


def _core(password: str) -> str:
    """The password lower-cased without the digits and symbols around it."""
    return _DECORATION.sub("", password.strip().lower())


def _name_forms(username: str) -> set[str]:
    name = username.strip().lower()
    if not name:
        return set()
    joined = _NOT_ALNUM.sub("", name)
    forms = {name, joined, name[::-1], joined[::-1], joined * 2}
    forms.update(p for p in re.split(r"[._-]+", name) if len(p) >= MIN_NAME_PART)
    return {f for f in forms if f}


def _trimmings(lowered: str) -> set[str]:
    """``lowered`` with up to ``MAX_TRIM`` digits or symbols cut from either end, in every
    combination ("trustno17" → "trustno1", "trustno"; "1qaz2wsx7" → "1qaz2wsx", …)."""
    n = len(lowered)
    lead = min(n - len(_LEADING.sub("", lowered)), MAX_TRIM)
    trail = min(n - len(_TRAILING.sub("", lowered)), MAX_TRIM)
    return {lowered[a:b] for a in range(lead + 1) for b in range(n - trail, n + 1) if a < b}


def _is_decorated(lowered: str, form: str) -> bool:
    """True when ``lowered`` is ``form`` with only digits and symbols around it
    ("Otto.Spinwell2026!", "2026ottospinwell")."""
    at = lowered.find(form)
    if at < 0:
        return _NOT_ALNUM.sub("", _core(lowered)) == form
    rest = lowered[:at] + lowered[at + len(form):]
    return not _DECORATION.sub("", rest)


def password_problem(password: str, *, username: str = "") -> str | None:
    """Why ``password`` is refused for the account ``username``, or None when it is fine."""
    if len(password) > MAX_PASSWORD_LENGTH:
        return f"is too long: at most {MAX_PASSWORD_LENGTH} characters"
    if not password.strip():
        return "must not be only blanks"
    if len(password) < MIN_PASSWORD_LENGTH:
        return f"must be at least {MIN_PASSWORD_LENGTH} characters long"
    core = _core(password)
    lowered = password.strip().lower()
    if any(_is_decorated(lowered, form) for form in _name_forms(username)):
        return ("must not be the username, nor the username with capitals, digits or "
                "symbols added, reversed or doubled")
    common = common_passwords()
    if (_trimmings(lowered) | {core, _NOT_ALNUM.sub("", lowered)}) & common:
        return (f"is one of the {len(common)} most used passwords (or one with digits or "
                "symbols added); choose one that is harder to guess")
    return None
