"""Trends of a series, machine time of a visit, and Pareto counts."""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special

from shopapp.balancing.numtext import short
from shopapp.measures.stats.base import (
    DEFAULT_IDLE_SECONDS,
    StatisticsInputError,
    _count,
    _nonempty,
    _real,
)

# ---------------------------------------------------------------------- trend


@dataclass(frozen=True)
class Trend:
    """Least-squares line ``y = intercept + slope·x`` through a series.

    See :func:`trend` for the formulas. ``x_first``/``x_last`` are the smallest
    and largest x of the data.
    """

    slope: float
    intercept: float
    slope_stderr: float
    p_value: float
    n: int
    x_first: float
    x_last: float

    def value_at(self, x: float) -> float:
        """Fitted value ``intercept + slope·x``."""
        return self.intercept + self.slope * _real("x", x)

    def crossing_x(self, limit: float) -> float | None:
        """The x where the fitted line meets ``limit``: ``(limit − intercept) / slope``.

        ``None`` for a flat line (slope 0), which meets the limit nowhere or
        everywhere.
        """
        level = _real("limit", limit)
        if self.slope == 0.0:
            return None
        out = (level - self.intercept) / self.slope
        return out if math.isfinite(out) else None

    def crosses(self, limit: float, before_x: float) -> bool:
        """Whether the fitted line, carried on past the data, reaches ``limit`` by ``before_x``.

        True when the line's values at ``x_last`` and ``before_x`` lie on
        different sides of ``limit`` or either equals it, i.e. the crossing x of
        :meth:`crossing_x` lies in ``[x_last, before_x]``. A line already past
        the limit at ``x_last`` does not cross it again: check the latest value
        (or :meth:`value_at`) for that. This is the fitted line only, with no
        prediction band; read it together with ``p_value``.

        Parameters
        ----------
        limit : float
            The level (a machine's claimed minimum residual unbalance, ...).
        before_x : float
            The x to look ahead to (the next due date as a day number), not
            before ``x_last``.

        Raises
        ------
        StatisticsInputError
            Non-finite ``limit``/``before_x``; ``before_x`` before ``x_last``.
        """
        level = _real("limit", limit)
        until = _real("before_x", before_x)
        if until < self.x_last:
            raise StatisticsInputError(
                "before_x", f"must not lie before the last data point ({short(self.x_last)})"
            )
        start = self.value_at(self.x_last) - level
        end = self.value_at(until) - level
        return start == 0.0 or end == 0.0 or (start < 0.0) != (end < 0.0)

    def as_json(self) -> dict[str, Any]:
        """``{"slope", "intercept", "slope_stderr", "p_value", "n", "x_first", "x_last"}``."""
        return {
            "slope": self.slope,
            "intercept": self.intercept,
            "slope_stderr": self.slope_stderr,
            "p_value": self.p_value,
            "n": self.n,
            "x_first": self.x_first,
            "x_last": self.x_last,
        }


def trend(xs: Sequence[float], ys: Sequence[float]) -> Trend:
    """Ordinary least-squares line through ``(xs, ys)`` and the test of its slope.

    With ``x̄, ȳ`` the means, ``Sxx = Σ(x − x̄)²``, ``Sxy = Σ(x − x̄)(y − ȳ)``::

        slope b = Sxy / Sxx,   intercept a = ȳ − b·x̄
        s² = Σ(y − a − b·x)² / (n − 2),   SE(b) = √(s² / Sxx)
        t = b / SE(b),   p-value = 2·P(T_{n−2} > |t|)

    (the textbook simple linear regression; e.g. Draper & Smith, *Applied
    Regression Analysis*, ch. 1 — from memory). The p-value tests "no trend"
    (slope 0), two-sided. For a perfect fit (``s² = 0``) the p-value is 0 for a
    sloped line and 1 for a flat one instead of the undefined ``0/0``.

    Dates go in as numbers (e.g. ``date.toordinal()`` for days); the slope is
    then per day.

    Parameters
    ----------
    xs, ys : sequence of float
        Same length, at least 3 points (two points always fit exactly and leave
        no error estimate), xs not all equal; finite numbers.

    Returns
    -------
    Trend

    Raises
    ------
    StatisticsInputError
        Empty or too short series, lengths that differ, non-numbers, NaN or
        infinity, all xs equal.
    """
    # Plain floats, not arrays: the owner's dashboard fits one short line per rotor
    # (thousands of them), where array set-up cost more than the arithmetic.
    x = [_real(f"xs[{i}]", v) for i, v in enumerate(_nonempty("xs", xs))]
    y = [_real(f"ys[{i}]", v) for i, v in enumerate(_nonempty("ys", ys))]
    if len(y) != len(x):
        raise StatisticsInputError("ys", f"has {len(y)} values but xs has {len(x)}")
    n = len(x)
    if n < 3:
        raise StatisticsInputError("xs", f"need at least 3 points for a trend, got {n}")
    try:
        x_mean, y_mean = math.fsum(x) / n, math.fsum(y) / n
        dx = [v - x_mean for v in x]
        sxx = math.fsum(d * d for d in dx)
        if sxx == 0.0:
            raise StatisticsInputError("xs", "all x values are equal; no slope can be fitted")
        if not math.isfinite(sxx):
            raise StatisticsInputError("xs", "values too large to fit a line")
        slope = math.fsum(d * (w - y_mean) for d, w in zip(dx, y, strict=True)) / sxx
        intercept = y_mean - slope * x_mean
        s2 = math.fsum((w - (intercept + slope * v)) ** 2 for v, w in zip(x, y, strict=True))
        s2 /= n - 2
        stderr = math.sqrt(s2 / sxx) if math.isfinite(s2) else math.inf
    except OverflowError:  # ** 2 of a huge float; caught as a field error like inf
        raise StatisticsInputError("ys", "values too large to fit a line") from None
    if not (math.isfinite(slope) and math.isfinite(intercept) and math.isfinite(stderr)):
        raise StatisticsInputError("ys", "values too large to fit a line")
    if stderr > 0.0:
        # 2·P(T_{n−2} > |t|) with Student's t CDF (scipy.special.stdtr: the same function
        # scipy.stats.t.sf uses, without its per-call set-up).
        p_value = float(2.0 * special.stdtr(n - 2, -abs(slope / stderr)))
    else:
        p_value = 0.0 if slope != 0.0 else 1.0
    return Trend(slope, intercept, stderr, p_value, n, min(x), max(x))



def trends(series: Sequence[tuple[Sequence[float], Sequence[float]]]) -> list[Trend | None]:
    """:func:`trend` of many short series at once: one array pass and one
    ``scipy.special.stdtr`` call for all the p-values.

    The formulas are :func:`trend`'s (ordinary least squares and the t-test of the
    slope, ``p = 2·P(T_{n−2} > |t|)``; a perfect fit gives 0 for a sloped line and 1 for
    a flat one). Each series is ``(xs, ys)``; where :func:`trend` would refuse a series
    (fewer than 3 points, lengths that differ, all xs equal, a value that is not a
    finite number, values too large to fit) its place holds ``None`` instead of an error,
    so one bad rotor cannot hide the others. Sums are plain floating-point sums, not
    ``math.fsum``: results agree with :func:`trend` to about 1e-12 relative.
    """
    count = len(series)
    if count == 0:
        return []
    width = max(max((len(xs) for xs, _ in series), default=0), 1)
    x = np.zeros((count, width))
    y = np.zeros((count, width))
    used = np.zeros((count, width), dtype=bool)
    usable = np.ones(count, dtype=bool)
    for i, (xs, ys) in enumerate(series):
        if len(xs) != len(ys) or len(xs) < 3:
            usable[i] = False
            continue
        try:
            x[i, :len(xs)] = xs
            y[i, :len(ys)] = ys
        except (TypeError, ValueError):
            usable[i] = False
            continue
        used[i, :len(xs)] = True
    with np.errstate(all="ignore"):
        usable &= np.isfinite(np.where(used, x, 0.0)).all(axis=1)
        usable &= np.isfinite(np.where(used, y, 0.0)).all(axis=1)
        used &= usable[:, None]
        n = used.sum(axis=1).astype(float)
        safe_n = np.where(n > 0, n, 1.0)
        x_mean = np.where(used, x, 0.0).sum(axis=1) / safe_n
        y_mean = np.where(used, y, 0.0).sum(axis=1) / safe_n
        dx = np.where(used, x - x_mean[:, None], 0.0)
        sxx = (dx * dx).sum(axis=1)
        usable &= (sxx != 0.0) & np.isfinite(sxx)
        safe_sxx = np.where(usable, sxx, 1.0)
        slope = (dx * np.where(used, y - y_mean[:, None], 0.0)).sum(axis=1) / safe_sxx
        intercept = y_mean - slope * x_mean
        resid = np.where(used, y - (intercept[:, None] + slope[:, None] * x), 0.0)
        s2 = (resid * resid).sum(axis=1) / np.where(n > 2, n - 2, 1.0)
        stderr = np.where(np.isfinite(s2), np.sqrt(s2 / safe_sxx), np.inf)
        usable &= np.isfinite(slope) & np.isfinite(intercept) & np.isfinite(stderr)
        t_stat = np.where(stderr > 0.0, np.abs(slope / np.where(stderr > 0.0, stderr, 1.0)), 0.0)
        p_value = np.where(stderr > 0.0, 2.0 * special.stdtr(np.maximum(n - 2, 1), -t_stat),
                           np.where(slope != 0.0, 0.0, 1.0))
        x_first = np.where(used, x, np.inf).min(axis=1)
        x_last = np.where(used, x, -np.inf).max(axis=1)
    return [
        Trend(float(slope[i]), float(intercept[i]), float(stderr[i]), float(p_value[i]),
              int(n[i]), float(x_first[i]), float(x_last[i])) if usable[i] else None
        for i in range(count)
    ]


# --------------------------------------------------------------- machine time


@dataclass(frozen=True)
class MachineTime:
    """Result of :func:`machine_time`: seconds counted and gaps cut to the threshold."""

    seconds: float
    runs: int
    gaps_cut: int
    idle_threshold_seconds: float

    def as_json(self) -> dict[str, Any]:
        """``{"seconds", "runs", "gaps_cut", "idle_threshold_seconds"}``."""
        return {
            "seconds": self.seconds,
            "runs": self.runs,
            "gaps_cut": self.gaps_cut,
            "idle_threshold_seconds": self.idle_threshold_seconds,
        }


def _seconds_of(run_times: Sequence[Any]) -> list[float]:
    if isinstance(run_times, str | bytes) or not isinstance(run_times, Sequence):
        raise StatisticsInputError("run_times", "must be a list")
    if not run_times:
        return []
    if all(isinstance(t, dt.datetime) for t in run_times):
        aware = {t.tzinfo is not None and t.utcoffset() is not None for t in run_times}
        if len(aware) > 1:
            raise StatisticsInputError(
                "run_times", "mixes times with and without a time zone"
            )
        first = run_times[0]
        return [(t - first).total_seconds() for t in run_times]
    if any(isinstance(t, dt.date) for t in run_times):
        raise StatisticsInputError(
            "run_times", "give all datetimes or all seconds, not dates or a mix"
        )
    return [_real(f"run_times[{i}]", t) for i, t in enumerate(run_times)]


def machine_time(
    run_times: Sequence[dt.datetime] | Sequence[float],
    idle_threshold: dt.timedelta | float = DEFAULT_IDLE_SECONDS,
) -> MachineTime:
    """Machine time of one job visit from the timestamps of its runs.

    The runs are put in time order; the machine time is the sum of the gaps
    between consecutive runs, each gap cut to the idle threshold::

        T = Σ min(tᵢ₊₁ − tᵢ, threshold)

    A gap longer than the threshold (lunch, another job in between) counts as
    the threshold, not as 0. Two reasons: the work right before a break
    (correcting, the next spin-up) did happen, and counting 0 would make the
    total jump by a whole threshold when a gap grows by one second past it;
    capping keeps the total continuous in every timestamp. The time after the
    last run's timestamp is not known and not counted, so a visit with one run
    has 0 s. (Definition chosen here, no source.)

    Parameters
    ----------
    run_times : sequence of datetime, or sequence of float
        Timestamps of the visit's runs: all datetimes (all with or all without
        a time zone) or all seconds. Empty or one run gives 0 s.
    idle_threshold : timedelta or float, optional
        Longest gap counted in full, > 0 (seconds if a number; default
        :data:`DEFAULT_IDLE_SECONDS`, 30 minutes).

    Returns
    -------
    MachineTime

    Raises
    ------
    StatisticsInputError
        Not a list, mixed kinds, NaN/infinite seconds, threshold not > 0.
    """
    if isinstance(idle_threshold, dt.timedelta):
        threshold = idle_threshold.total_seconds()
    else:
        threshold = _real("idle_threshold", idle_threshold)
    if threshold <= 0.0:
        raise StatisticsInputError("idle_threshold", "must be longer than zero")
    seconds = sorted(_seconds_of(run_times))
    gaps = np.diff(np.array(seconds, dtype=float))
    total = float(np.minimum(gaps, threshold).sum()) if gaps.size else 0.0
    cut = int((gaps > threshold).sum()) if gaps.size else 0
    return MachineTime(total, len(seconds), cut, threshold)


# --------------------------------------------------------------------- pareto


@dataclass(frozen=True)
class ParetoItem:
    """One bar of a Pareto chart; percentages are ``None`` when all counts are 0."""

    label: str
    count: int
    percent: float | None
    cumulative_percent: float | None

    def as_json(self) -> dict[str, Any]:
        """``{"label", "count", "percent", "cumulative_percent"}``."""
        return {
            "label": self.label,
            "count": self.count,
            "percent": self.percent,
            "cumulative_percent": self.cumulative_percent,
        }


def pareto(counts: Mapping[str, int]) -> tuple[ParetoItem, ...]:
    """Counts sorted largest first, with each one's share and the running share.

    With total ``N = Σcᵢ`` and items sorted by count (largest first, ties by
    label)::

        percent_k = 100·c_k / N,   cumulative_k = 100·(c₁ + … + c_k) / N

    (the Pareto chart of quality practice; Juran — from memory). The running
    sum is kept in whole counts, so the last cumulative value is exactly 100.

    Parameters
    ----------
    counts : mapping of str to int
        Reason → count, counts ≥ 0. An empty mapping gives an empty tuple (no
        reasons is a true answer, not an error).

    Returns
    -------
    tuple of ParetoItem

    Raises
    ------
    StatisticsInputError
        Not a mapping, a label not a string, a negative or non-whole count.
    """
    if not isinstance(counts, Mapping):
        raise StatisticsInputError("counts", "must be a mapping of label to count")
    items: list[tuple[str, int]] = []
    for label, value in counts.items():
        if not isinstance(label, str):
            raise StatisticsInputError("counts", f"label {label!r} must be a string")
        items.append((label, _count(f"counts[{label!r}]", value)))
    items.sort(key=lambda kv: (-kv[1], kv[0]))
    total = sum(c for _, c in items)
    out: list[ParetoItem] = []
    running = 0
    for label, c in items:
        running += c
        if total:
            out.append(ParetoItem(label, c, 100.0 * c / total, 100.0 * running / total))
        else:
            out.append(ParetoItem(label, c, None, None))
    return tuple(out)

