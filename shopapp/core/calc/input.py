"""Reading ``shopapp calc`` requests: JSON values to numbers, phasors and unbalances.

Shared by :mod:`shopapp.cli.calc` and its companion modules. Every reader names the
offending field in a :class:`~shopapp.balancing.errors.BalancingInputError`
(``trials[0].readings[1].angle_deg``), refuses text where a number belongs, and
never guesses.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.numtext import short
from shopapp.balancing.phasors import phasor

Request = dict[str, Any]
Response = dict[str, Any]


def path(parent: str, key: str | int) -> str:
    """Field name of ``key`` inside ``parent``: ``a.b`` or ``a[3]``."""
    if isinstance(key, int):
        return f"{parent}[{key}]"
    return f"{parent}.{key}" if parent else key


def require(obj: Request, key: str, parent: str = "") -> Any:
    """``obj[key]``; missing or null is an error naming the field."""
    if key not in obj or obj[key] is None:
        raise BalancingInputError(path(parent, key), "is required")
    return obj[key]


def as_object(value: Any, field: str) -> Request:
    """``value`` if it is a JSON object."""
    if not isinstance(value, dict):
        raise BalancingInputError(field, "must be a JSON object")
    return value


def as_list(value: Any, field: str) -> list[Any]:
    """``value`` if it is a JSON list."""
    if not isinstance(value, list):
        raise BalancingInputError(field, "must be a JSON list")
    return value


def as_number(value: Any, field: str) -> float:
    """``value`` as a finite float; booleans and text are refused."""
    # JSON booleans are ints to Python; a number typed as text is refused, not guessed.
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise BalancingInputError(field, f"must be a number, got {json.dumps(value)}")
    out = float(value)
    if not math.isfinite(out):
        raise BalancingInputError(field, f"must be a finite number, got {value!r}")
    return out


def number(obj: Request, key: str, parent: str = "") -> float:
    """Required number ``obj[key]``."""
    return as_number(require(obj, key, parent), path(parent, key))


def opt_number(obj: Request, key: str, parent: str = "") -> float | None:
    """Optional number ``obj[key]`` (None when missing or null)."""
    if obj.get(key) is None:
        return None
    return as_number(obj[key], path(parent, key))


def number_or(obj: Request, key: str, default: float) -> float:
    """Optional number ``obj[key]`` with a default."""
    value = opt_number(obj, key)
    return default if value is None else value


def integer(obj: Request, key: str, parent: str = "") -> int:
    """Required whole number ``obj[key]``."""
    value = number(obj, key, parent)
    if value != int(value):
        raise BalancingInputError(path(parent, key), f"must be a whole number, got {short(value)}")
    return int(value)


def text(obj: Request, key: str, default: str, parent: str = "") -> str:
    """Optional text ``obj[key]`` with a default."""
    value = obj.get(key, default)
    if not isinstance(value, str):
        raise BalancingInputError(path(parent, key), "must be text")
    return value


def reading(value: Any, field: str) -> complex:
    """``{"amplitude", "angle_deg"}`` → complex phasor."""
    obj = as_object(value, field)
    return phasor(number(obj, "amplitude", field), number(obj, "angle_deg", field), field=field)


def readings(value: Any, field: str) -> list[complex]:
    """Non-empty list of readings → complex phasors."""
    items = as_list(value, field)
    if not items:
        raise BalancingInputError(field, "must list at least one reading")
    return [reading(item, path(field, k)) for k, item in enumerate(items)]


def unbalance(value: Any, field: str) -> complex:
    """``{"unbalance_gmm", "angle_deg"}`` or ``{"mass_g", "radius_mm", "angle_deg"}`` → g·mm."""
    obj = as_object(value, field)
    angle = number(obj, "angle_deg", field)
    if "unbalance_gmm" in obj:
        amount = number(obj, "unbalance_gmm", field)
        name = "unbalance_gmm"
    elif "mass_g" in obj:
        mass = number(obj, "mass_g", field)
        radius = number(obj, "radius_mm", field)
        if radius <= 0.0:
            raise BalancingInputError(path(field, "radius_mm"), "must be greater than zero")
        amount, name = mass * radius, "mass_g"
    else:
        raise BalancingInputError(
            path(field, "unbalance_gmm"), "is required (or mass_g with radius_mm)"
        )
    if amount < 0.0:
        raise BalancingInputError(path(field, name), "must not be negative")
    return phasor(amount, angle, field=field)


@contextmanager
def renamed_fields(mapping: dict[str, str] | None = None, prefix: str = "") -> Iterator[None]:
    """Rename the core's field names to the request's (``grade_mm_s`` → ``grade``)."""
    try:
        yield
    except BalancingInputError as exc:
        field = (mapping or {}).get(exc.field, prefix + exc.field)
        raise BalancingInputError(field, exc.message) from None
