"""Shared pieces of the shop statistics: constants, the input error, argument checks."""

from __future__ import annotations

import math
import operator
from collections.abc import Mapping, Sequence
from types import MappingProxyType
from typing import Any, Literal

from scipy import stats

from shopapp.balancing.numtext import short

#: The one sentence the owner's page and the PDF show beside every flag.
CAUTION = (
    "A flagged unit is a question to look into, not a verdict on a person: "
    "chance alone rarely puts a figure outside these limits, but causes other than "
    "the person's work (the mix of rotors, a machine, a customer) often do."
)

#: Whether a higher value is the better one, per shop measure (the direction flag
#: that :func:`compare_rates` needs). Keys are the rate names of
#: ``shopapp.services.measures``; ``rejection_rate`` and ``late_rate`` are the
#: shares of jobs rejected and dispatched after their promised date.
HIGHER_IS_BETTER: Mapping[str, bool] = MappingProxyType(
    {
        "first_pass_rate": True,
        "promised_hit_rate": True,
        "rework_rate": False,
        "rejection_rate": False,
        "late_rate": False,
    }
)

#: Fewest jobs on each side before :func:`compare_rates` calls any change.
MIN_JOBS_TO_COMPARE = 5
#: Below this smallest expected cell count the z-test gives way to Fisher's exact
#: test (Cochran's rule, Cochran 1954 — from memory).
MIN_EXPECTED_COUNT = 5.0
#: Units with fewer jobs than this are never flagged on a funnel plot.
MIN_FUNNEL_JOBS = 5
#: Coverage of the funnel limits that flag a unit (99.8 %: 0.1 % in each tail).
FLAG_LEVEL = 0.998
#: Coverage of the inner, warning-only funnel limits.
WARNING_LEVEL = 0.95
#: Points in a row on one side of the p-chart's centre line that make a run.
RUN_LENGTH = 8
#: Gaps between runs longer than this (seconds) count only up to it (30 minutes).
DEFAULT_IDLE_SECONDS = 30.0 * 60.0
#: Most limit points :func:`funnel_curve` returns in one call.
MAX_CURVE_POINTS = 100_000

_Z95 = float(stats.norm.ppf(0.975))

Side = Literal["above", "below"]
Key = str | int


class StatisticsInputError(ValueError):
    """Bad input to a statistics function.

    Carries the name of the offending field so the page or CLI can put the
    message beside the right input.

    Parameters
    ----------
    field : str
        Name of the input field as the caller spelled it (``"denominator"``,
        ``"units[2].numerator"``).
    message : str
        Plain-language reason.
    """

    def __init__(self, field: str, message: str) -> None:
        super().__init__(f"{field}: {message}")
        self.field = field
        self.message = message


# --------------------------------------------------------------------- checks


def _count(name: str, value: Any) -> int:
    """Return ``value`` as a non-negative int, refusing floats, bools and negatives."""
    if isinstance(value, bool):
        raise StatisticsInputError(name, f"must be a whole number, got {value!r}")
    try:
        out = operator.index(value)
    except TypeError:
        raise StatisticsInputError(name, f"must be a whole number, got {value!r}") from None
    if out < 0:
        raise StatisticsInputError(name, f"must not be negative, got {out}")
    return out


def _pair(prefix: str, numerator: Any, denominator: Any) -> tuple[int, int]:
    """Check a numerator/denominator pair of counts; field names get ``prefix``."""
    x = _count(f"{prefix}numerator", numerator)
    n = _count(f"{prefix}denominator", denominator)
    if x > n:
        raise StatisticsInputError(
            f"{prefix}numerator", f"{x} is more than the denominator {n}"
        )
    return x, n


def _real(name: str, value: Any) -> float:
    """Return ``value`` as a finite float, refusing bools, NaN and infinity."""
    if isinstance(value, bool):
        raise StatisticsInputError(name, f"must be a number, got {value!r}")
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise StatisticsInputError(name, f"must be a number, got {value!r}") from None
    if not math.isfinite(out):
        raise StatisticsInputError(name, f"must be a finite number, got {value!r}")
    return out


def _proportion(name: str, value: Any) -> float:
    out = _real(name, value)
    if not 0.0 <= out <= 1.0:
        raise StatisticsInputError(name, f"must lie between 0 and 1, got {short(out)}")
    return out


def _open_unit(name: str, value: Any) -> float:
    out = _real(name, value)
    if not 0.0 < out < 1.0:
        raise StatisticsInputError(name, f"must lie strictly between 0 and 1, got {short(out)}")
    return out


def _nonempty(name: str, values: Any) -> Sequence[Any]:
    if isinstance(values, str | bytes) or not isinstance(values, Sequence):
        raise StatisticsInputError(name, "must be a list")
    if len(values) == 0:
        raise StatisticsInputError(name, "must not be empty")
    return values


def _percent(value: float) -> str:
    return f"{100.0 * value:.1f} %"


def _pair_json(pair: tuple[float, float] | None) -> list[float] | None:
    return None if pair is None else [float(pair[0]), float(pair[1])]


