"""Input checks shared by the balancing modules.

Every public function of the core validates its inputs with these so that a bad
value fails with :class:`BalancingInputError` naming the field, never with a
numpy warning, a NaN result or a ``ZeroDivisionError``.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

import numpy as np

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.numtext import short


def finite(field: str, value: float) -> float:
    """Return ``value`` as a float, refusing NaN, infinity and non-numbers."""
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise BalancingInputError(field, f"must be a number, got {value!r}") from None
    if not math.isfinite(out):
        raise BalancingInputError(field, f"must be a finite number, got {value!r}")
    return out


def positive(field: str, value: float) -> float:
    """Return ``value`` as a float, refusing zero, negatives, NaN and infinity."""
    out = finite(field, value)
    if out <= 0.0:
        raise BalancingInputError(field, f"must be greater than zero, got {short(out)}")
    return out


def non_negative(field: str, value: float) -> float:
    """Return ``value`` as a float, refusing negatives, NaN and infinity."""
    out = finite(field, value)
    if out < 0.0:
        raise BalancingInputError(field, f"must not be negative, got {short(out)}")
    return out


# What the numerics accept as an array: a number, nested sequences of numbers, or an ndarray.
ArrayInput = complex | Iterable[complex] | Iterable[Iterable[complex]] | np.ndarray


def finite_array(field: str, values: ArrayInput) -> np.ndarray:
    """Return ``values`` (a number, a sequence or an array, real or complex) as a float or
    complex ndarray, refusing NaN and infinity."""
    try:
        arr = np.asarray(values)
    except (TypeError, ValueError):
        raise BalancingInputError(field, "must be an array of numbers") from None
    if arr.dtype.kind not in "biufc":
        raise BalancingInputError(field, "must be an array of numbers")
    if not np.all(np.isfinite(arr)):
        raise BalancingInputError(field, "contains NaN or infinite values")
    return arr if arr.dtype.kind in "fc" else arr.astype(float)


def positive_array(field: str, values: Iterable[float] | np.ndarray) -> np.ndarray:
    """Return ``values`` as a float ndarray whose every element is > 0."""
    arr = finite_array(field, values)
    if arr.dtype.kind == "c":
        raise BalancingInputError(field, "must be real numbers")
    if np.any(arr <= 0.0):
        raise BalancingInputError(field, "every value must be greater than zero")
    return arr


def whole(field: str, value: int, minimum: int) -> int:
    """Return ``value`` as an int no smaller than ``minimum``."""
    if isinstance(value, bool):
        raise BalancingInputError(field, f"must be a whole number, got {value!r}")
    try:
        as_float = float(value)
    except (TypeError, ValueError):
        raise BalancingInputError(field, f"must be a whole number, got {value!r}") from None
    if not math.isfinite(as_float) or as_float != int(as_float):
        raise BalancingInputError(field, f"must be a whole number, got {value!r}")
    out = int(as_float)
    if out < minimum:
        raise BalancingInputError(field, f"must be at least {minimum}, got {out}")
    return out
