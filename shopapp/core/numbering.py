"""Job numbers from the shop's pattern (``ShopSettings.job_number_pattern``).

A pattern is a Python format string with these fields:

- ``{seq}`` (required, any integer format such as ``{seq:05d}``): the running number;
- ``{year}`` (four digits), ``{yy}`` (two digits), ``{month}`` (two digits).

The running number restarts every year when the pattern contains ``{year}`` or
``{yy}`` (``J2026-00001``, ``J2027-00001``, ...), and runs on for ever otherwise
(``J-000123``). It is the largest number already used for the same year plus one
(found by matching the pattern against existing numbers, so numbers typed into
the pattern by hand or imported keep counting). Two people booking in at the
same moment may compute the same number: the unique constraint on
``job.number`` catches that and the caller retries with the next one
(:func:`shopapp.jobs.intake.book_in` does, inside a savepoint).
"""

from __future__ import annotations

import datetime as dt
import re
import string

from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.core.errors import ValidationFailed
from shopapp.models import Job

ALLOWED_FIELDS = ("seq", "year", "yy", "month")
DEFAULT_PATTERN = "J{year}-{seq:05d}"
MAX_NUMBER_LENGTH = 40  # job.number is String(40)


def validate_pattern(pattern: str) -> None:
    """Raise :class:`ValidationFailed` (field ``job_number_pattern``) for a bad pattern."""
    field = "job_number_pattern"
    try:
        parts = list(string.Formatter().parse(pattern))
    except ValueError as exc:
        raise ValidationFailed(field, f"{pattern!r} is not a valid pattern ({exc})") from None
    names = [name for _, name, _, _ in parts if name is not None]
    unknown = [n for n in names if n not in ALLOWED_FIELDS]
    if unknown:
        raise ValidationFailed(
            field,
            f"unknown field {{{unknown[0]}}}; allowed are "
            + ", ".join(f"{{{n}}}" for n in ALLOWED_FIELDS),
        )
    if names.count("seq") != 1:
        raise ValidationFailed(field, "must contain {seq} exactly once (e.g. J{year}-{seq:05d})")
    try:
        sample = format_number(pattern, on=dt.date(2026, 12, 31), seq=99999)
    except (ValueError, TypeError) as exc:
        raise ValidationFailed(field, f"{pattern!r} cannot be filled in ({exc})") from None
    if len(sample) > MAX_NUMBER_LENGTH or not sample.strip():
        raise ValidationFailed(field, f"gives numbers longer than {MAX_NUMBER_LENGTH} characters")


def format_number(pattern: str, *, on: dt.date, seq: int) -> str:
    """Fill in ``pattern`` for date ``on`` and running number ``seq``."""
    return pattern.format(seq=seq, year=f"{on.year:04d}", yy=f"{on.year % 100:02d}",
                          month=f"{on.month:02d}")


def per_year(pattern: str) -> bool:
    """Whether the running number restarts each year (pattern holds ``{year}`` or ``{yy}``)."""
    names = {name for _, name, _, _ in string.Formatter().parse(pattern) if name}
    return bool(names & {"year", "yy"})


def _matcher(pattern: str, on: dt.date) -> tuple[re.Pattern[str], str]:
    """Regex that captures ``seq`` from numbers of this year (or any month), and a LIKE."""
    regex = ["^"]
    like = []
    for literal, name, _spec, _conv in string.Formatter().parse(pattern):
        regex.append(re.escape(literal))
        like.append(literal.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_"))
        if name is None:
            continue
        if name == "seq":
            regex.append(r"(?P<seq>\d+)")
            like.append("%")
        elif name == "year":
            regex.append(f"{on.year:04d}")
            like.append(f"{on.year:04d}")
        elif name == "yy":
            regex.append(f"{on.year % 100:02d}")
            like.append(f"{on.year % 100:02d}")
        else:  # month: any month counts towards the same sequence
            regex.append(r"\d{2}")
            like.append("__")
    regex.append("$")
    return re.compile("".join(regex)), "".join(like)


def next_seq(session: Session, pattern: str, *, on: dt.date) -> int:
    """The next running number for ``pattern`` on date ``on`` (1 for the first)."""
    regex, like = _matcher(pattern, on)
    numbers = session.scalars(select(Job.number).where(Job.number.like(like, escape="\\")))
    best = 0
    for number in numbers:
        m = regex.match(number)
        if m:
            best = max(best, int(m.group("seq")))
    return best + 1


def next_job_number(session: Session, pattern: str, *, on: dt.date, skip: int = 0) -> str:
    """The next job number; ``skip`` moves past numbers taken by a concurrent booking."""
    validate_pattern(pattern)
    return format_number(pattern, on=on, seq=next_seq(session, pattern, on=on) + skip)
