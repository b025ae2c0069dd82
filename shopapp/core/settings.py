"""The shop's settings row (created with defaults on first write, never on a GET)."""

from __future__ import annotations

import datetime as dt
import math
import re
import string
from typing import Any

from sqlalchemy.orm import Session

from shopapp.core import audit, numbering
from shopapp.core.errors import ValidationFailed
from shopapp.core.permissions import require
from shopapp.models import ANGLE_SENSES, UNBALANCE_DISPLAY_UNITS, ShopSettings, User, utcnow

JOB_NUMBER_MAX_LENGTH = 40  # job.number is String(40)
SETTINGS_FIELDS = (
    "shop_name",
    "shop_address",
    "angle_sense",
    "angle_zero_deg",
    "unbalance_unit",
    "job_number_pattern",
    "due_soon_days",
)


def get_settings(session: Session) -> ShopSettings:
    """The settings; an unsaved default row when none was stored yet (no write on read)."""
    row = session.get(ShopSettings, 1)
    if row is not None:
        return row
    defaults = ShopSettings(id=1)
    # Column defaults only apply at INSERT; fill them in for the unsaved object.
    for col in ShopSettings.__table__.columns:
        if getattr(defaults, col.key) is None and col.default is not None and col.default.is_scalar:
            setattr(defaults, col.key, col.default.arg)
    return defaults


def settings_for_update(session: Session) -> ShopSettings:
    """The stored settings row, inserted with defaults if missing (for writers)."""
    row = session.get(ShopSettings, 1)
    if row is None:
        row = get_settings(session)
        session.add(row)
        session.flush()
    return row


def check_job_number_pattern(pattern: str) -> str:
    """The sample number of ``pattern`` (seq 42 on 2026-03-01), or :class:`ValidationFailed`.

    The rules of :func:`shopapp.core.numbering.validate_pattern` (known fields,
    ``{seq}`` exactly once, numbers of at most 40 characters), and also: each
    job gets a different number, and numbers hold no spaces or ``/ \\ ? # %``
    (they appear in links and file names).
    """
    field = "job_number_pattern"
    allowed = "use {seq} (e.g. {seq:05d}) and optionally {year}, {yy}, {month}"
    if not pattern.strip():
        raise ValidationFailed(field, f"is required; {allowed}")
    if len(pattern) > 64:
        raise ValidationFailed(field, f"is too long: {len(pattern)} characters, at most 64")
    try:
        fields = list(string.Formatter().parse(pattern))
    except ValueError:
        fields = []  # numbering.validate_pattern says what is wrong
    for _, name, spec, _conv in fields:
        # A huge width ({seq:999999999d}) would build a gigabyte string: refuse first.
        if spec and any(int(n) > JOB_NUMBER_MAX_LENGTH for n in re.findall(r"\d+", spec)):
            raise ValidationFailed(
                field, f"{{{name}:{spec}}} is wider than {JOB_NUMBER_MAX_LENGTH} characters"
            )
        if name == "seq":
            # The next number is found by reading the running number back as digits.
            try:
                shown = [format(n, spec or "") for n in (7, 42, 1234567)]
            except (ValueError, TypeError, OverflowError):
                shown = ["?"]
            if not all(x.isdigit() and x.isascii() for x in shown):
                raise ValidationFailed(
                    field,
                    f"{{seq:{spec}}} must show the running number as plain digits "
                    "(e.g. {seq} or {seq:05d})",
                )
    numbering.validate_pattern(pattern)
    day = dt.date(2026, 3, 1)
    try:
        sample = numbering.format_number(pattern, on=day, seq=42)
        other = numbering.format_number(pattern, on=day, seq=43)
    except (KeyError, ValueError, IndexError, AttributeError, TypeError) as exc:
        raise ValidationFailed(field, f"cannot be filled in ({exc}); {allowed}") from None
    if sample == other:
        raise ValidationFailed(field, "must give a different number for each job; " + allowed)
    if any(ch.isspace() or ch in "/\\?#%" for ch in sample):
        raise ValidationFailed(field, "numbers may not contain spaces or / \\ ? # %")
    return sample


def _clean(values: dict[str, Any]) -> dict[str, Any]:
    errors: dict[str, str] = {}
    out: dict[str, Any] = {}
    for name, value in values.items():
        try:
            out[name] = _clean_one(name, value)
        except ValidationFailed as exc:
            errors.update(exc.errors)
    if errors:
        first = next(iter(errors))
        raise ValidationFailed(first, errors[first], errors=errors)
    return out


def _clean_one(name: str, value: Any) -> Any:
    if name in ("shop_name", "shop_address"):
        text = "" if value is None else str(value).strip()
        limit = 200 if name == "shop_name" else 2000
        if name == "shop_name" and not text:
            raise ValidationFailed(name, "is required (it heads every certificate)")
        if len(text) > limit:
            raise ValidationFailed(name, f"is too long: {len(text)} characters, at most {limit}")
        return text
    if name == "angle_sense":
        if value not in ANGLE_SENSES:
            raise ValidationFailed(name, f"choose one of {', '.join(ANGLE_SENSES)}")
        return value
    if name == "unbalance_unit":
        if value not in UNBALANCE_DISPLAY_UNITS:
            raise ValidationFailed(name, f"choose one of {', '.join(UNBALANCE_DISPLAY_UNITS)}")
        return value
    if name == "angle_zero_deg":
        try:
            angle = float(value)
        except (TypeError, ValueError):
            raise ValidationFailed(name, f"must be a number of degrees, got {value!r}") from None
        if not math.isfinite(angle) or not 0.0 <= angle < 360.0:
            raise ValidationFailed(name, f"must be from 0 up to (not including) 360, got {value!r}")
        return angle
    if name == "due_soon_days":
        if isinstance(value, bool):
            raise ValidationFailed(name, "must be a whole number of days")
        try:
            days = int(value)
        except (TypeError, ValueError, OverflowError):
            raise ValidationFailed(name, f"must be a whole number of days, got {value!r}") from None
        if isinstance(value, float) and value != days:
            raise ValidationFailed(name, f"must be a whole number of days, got {value!r}")
        if not 0 <= days <= 3650:
            raise ValidationFailed(name, f"must be between 0 and 3650 days, got {days}")
        return days
    if name == "job_number_pattern":
        pattern = "" if value is None else str(value).strip()
        check_job_number_pattern(pattern)
        return pattern
    raise TypeError(f"unknown setting {name!r}")


def update_settings(session: Session, *, by: User, **values: Any) -> ShopSettings:
    """Change shop settings (admin only); every value is checked, nothing is half-saved.

    ``angle_sense`` one of :data:`~shopapp.models.ANGLE_SENSES`; ``angle_zero_deg``
    in [0, 360); ``unbalance_unit`` one of
    :data:`~shopapp.models.UNBALANCE_DISPLAY_UNITS`; ``job_number_pattern`` see
    :func:`check_job_number_pattern`; ``due_soon_days`` 0–3650.
    """
    require(by, "edit_settings")
    clean = _clean(values)
    row = settings_for_update(session)
    before = audit.snapshot(row)
    for name, value in clean.items():
        setattr(row, name, value)
    row.updated_at = utcnow()
    session.flush()
    audit.record(
        session, by=by, entity="shop_settings", entity_id=row.id, action="update",
        before=before, after=audit.snapshot(row),
    )
    return row
