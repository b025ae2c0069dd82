"""Funnel plots (exact binomial limits) and monthly p-charts."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from shopapp.measures.stats.base import (
    CAUTION,
    FLAG_LEVEL,
    MAX_CURVE_POINTS,
    MIN_FUNNEL_JOBS,
    RUN_LENGTH,
    WARNING_LEVEL,
    Key,
    Side,
    StatisticsInputError,
    _count,
    _nonempty,
    _pair,
    _pair_json,
    _proportion,
)
from shopapp.measures.stats.rates import (
    Rate,
)

# --------------------------------------------------------------------- funnel


@dataclass(frozen=True)
class FunnelLimits:
    """Funnel control limits for ``n`` jobs around one target rate.

    ``counts_95`` and ``counts_99_8`` are the limits on the count of events,
    ``(low, high)``; ``limits_95`` and ``limits_99_8`` the same divided by
    ``n``, as rates. A count strictly outside ``counts_99_8`` is flagged. See
    :func:`funnel_limits`.
    """

    n: int
    counts_95: tuple[int, int]
    counts_99_8: tuple[int, int]

    @property
    def limits_95(self) -> tuple[float, float]:
        """Inner (warning) limits as rates."""
        return self.counts_95[0] / self.n, self.counts_95[1] / self.n

    @property
    def limits_99_8(self) -> tuple[float, float]:
        """Outer (flagging) limits as rates."""
        return self.counts_99_8[0] / self.n, self.counts_99_8[1] / self.n

    def as_json(self) -> dict[str, Any]:
        """``{"n", "limits_95": [low, high], "limits_99_8": [low, high], "counts_99_8": [..]}``."""
        return {
            "n": self.n,
            "limits_95": _pair_json(self.limits_95),
            "limits_99_8": _pair_json(self.limits_99_8),
            "counts_99_8": list(self.counts_99_8),
        }


def _count_limits(target: float, n: np.ndarray) -> np.ndarray:
    """Exact binomial limits on the count at both coverages: ppf at (1 − c)/2 and (1 + c)/2
    for c = :data:`WARNING_LEVEL` and :data:`FLAG_LEVEL`, rows in that order (low 95 %,
    high 95 %, low 99.8 %, high 99.8 %), one column per ``n``. One broadcast call: scipy's
    ppf costs about as much for four quantiles as for one."""
    tails = [(1.0 - c) / 2.0 for c in (WARNING_LEVEL, FLAG_LEVEL)]
    q = np.array([tails[0], 1.0 - tails[0], tails[1], 1.0 - tails[1]])[:, None]
    return np.asarray(stats.binom.ppf(q, n[None, :], target), dtype=float)


def _limits_for(target: float, ns: np.ndarray) -> list[FunnelLimits]:
    lo95, hi95, lo998, hi998 = _count_limits(target, ns)
    return [
        FunnelLimits(
            int(n), (int(lo95[i]), int(hi95[i])), (int(lo998[i]), int(hi998[i]))
        )
        for i, n in enumerate(ns)
    ]


def funnel_limits(target: float, n: int) -> FunnelLimits:
    """Exact binomial funnel limits for one unit of ``n`` jobs.

    With ``X ~ Binomial(n, target)`` and ``Q(q)`` its quantile — the smallest
    count ``k`` with ``P(X ≤ k) ≥ q`` (``scipy.stats.binom.ppf``) — the limits
    on the rate for coverage ``c`` are::

        low  = Q((1 − c)/2) / n,   high = Q((1 + c)/2) / n

    for ``c`` = 95 % (warning) and 99.8 % (flag). Source: the exact binomial
    funnel limits of Spiegelhalter, D. J. (2005), "Funnel plots for comparing
    institutional performance", Statistics in Medicine 24:1185–1202 — from
    memory.

    Spiegelhalter also interpolates between neighbouring counts to draw smooth
    lines; that is deliberately **not** done here. Without interpolation a count
    ``x`` is outside the limits exactly when ``x > Q((1 + c)/2)`` or
    ``x < Q((1 − c)/2)``, which by the definition of ``Q`` has probability at
    most ``(1 − c)/2`` in each tail under the target rate — the flag is never
    more eager than its stated level — and a point drawn outside its line is
    always a flagged point (interpolated lines lie inside the count limits, so
    an unflagged point could be drawn outside them). The price is a slightly
    conservative level and jagged lines; draw them as given, point by point.

    Parameters
    ----------
    target : float
        The rate the units are compared with, in [0, 1].
    n : int
        Jobs of the unit, ``≥ 1``.

    Returns
    -------
    FunnelLimits

    Raises
    ------
    StatisticsInputError
        ``target`` outside [0, 1] or not finite; ``n`` below 1 or not whole.
    """
    return funnel_limits_at(target, (n,))[0]


def funnel_limits_at(target: float, ns: Sequence[int]) -> tuple[FunnelLimits, ...]:
    """:func:`funnel_limits` for each of ``ns``, worked out in one vectorised call
    (``scipy.stats.binom.ppf`` costs about 0.2 ms a call whatever its length, so the
    vertices of a funnel's lines are asked for together, not one by one).

    Raises
    ------
    StatisticsInputError
        ``target`` outside [0, 1] or not finite; an ``n`` below 1 or not whole.
    """
    p = _proportion("target", target)
    jobs = [_count("n", n) for n in ns]
    if any(j < 1 for j in jobs):
        raise StatisticsInputError("n", "must be at least 1")
    return tuple(_limits_for(p, np.array(jobs, dtype=np.int64)))


def funnel_curve(target: float, n_max: int, *, n_min: int = 1) -> tuple[FunnelLimits, ...]:
    """Funnel limit lines for drawing: :func:`funnel_limits` at every ``n``.

    Parameters
    ----------
    target : float
        The rate the units are compared with, in [0, 1].
    n_max : int
        Largest number of jobs on the x axis.
    n_min : int, optional
        Smallest number of jobs (default 1).

    Returns
    -------
    tuple of FunnelLimits
        One per whole ``n`` from ``n_min`` to ``n_max``; the lines are exact
        binomial limits without interpolation, so they step.

    Raises
    ------
    StatisticsInputError
        ``target`` outside [0, 1]; ``n_min`` below 1; ``n_max`` below ``n_min``;
        more than :data:`MAX_CURVE_POINTS` points.
    """
    p = _proportion("target", target)
    lo = _count("n_min", n_min)
    hi = _count("n_max", n_max)
    if lo < 1:
        raise StatisticsInputError("n_min", "must be at least 1")
    if hi < lo:
        raise StatisticsInputError("n_max", f"must not be below n_min ({lo}), got {hi}")
    if hi - lo + 1 > MAX_CURVE_POINTS:
        raise StatisticsInputError(
            "n_max", f"at most {MAX_CURVE_POINTS} points per curve, asked {hi - lo + 1}"
        )
    return tuple(_limits_for(p, np.arange(lo, hi + 1)))


@dataclass(frozen=True)
class FunnelUnit:
    """One unit (operator, machine, rotor type, customer) on a funnel plot.

    ``limits`` is ``None`` when the unit has no jobs or there is no target
    rate. ``flag`` is ``"above"``/``"below"`` when the count lies outside the
    99.8 % limits and the unit has at least ``min_jobs`` jobs, else ``None``.
    """

    key: Key
    label: str
    rate: Rate
    limits: FunnelLimits | None
    flag: Side | None
    sentence: str

    def as_json(self) -> dict[str, Any]:
        """``{"key", "label", "rate", "limits_95", "limits_99_8", "flag", "sentence"}``."""
        return {
            "key": self.key,
            "label": self.label,
            "rate": self.rate.as_json(),
            "limits_95": None if self.limits is None else _pair_json(self.limits.limits_95),
            "limits_99_8": None if self.limits is None else _pair_json(self.limits.limits_99_8),
            "flag": self.flag,
            "sentence": self.sentence,
        }


@dataclass(frozen=True)
class Funnel:
    """Result of :func:`funnel`.

    ``overall`` pools all units' counts; ``target`` is the rate the limits are
    drawn around (the ``overall_p`` given, else ``overall.value``; ``None`` when
    no unit has jobs and none was given).
    """

    overall: Rate
    target: float | None
    units: tuple[FunnelUnit, ...]
    min_jobs: int
    flag_level: float = FLAG_LEVEL

    def as_json(self) -> dict[str, Any]:
        """``{"overall": Rate, "target", "flag_level", "min_jobs", "caution", "units": [...]}``.

        Each unit is :meth:`FunnelUnit.as_json`; ``overall`` is :meth:`Rate.as_json`.
        """
        return {
            "overall": self.overall.as_json(),
            "target": self.target,
            "flag_level": self.flag_level,
            "min_jobs": self.min_jobs,
            "caution": CAUTION,
            "units": [u.as_json() for u in self.units],
        }


def _jobs(n: int) -> str:
    return "1 job" if n == 1 else f"{n} jobs"


def funnel(
    units: Sequence[tuple[Key, str, int, int]],
    overall_p: float | None = None,
    *,
    nouns: tuple[str, str] = ("event", "events"),
    min_jobs: int = MIN_FUNNEL_JOBS,
) -> Funnel:
    """Funnel plot: which units' rates lie outside what chance explains.

    The target rate is ``overall_p`` when given, else the pooled rate
    ``Σxᵢ / Σnᵢ`` of all units. Each unit with ``n ≥ 1`` jobs gets the exact
    binomial limits of :func:`funnel_limits` (95 % and 99.8 %, no
    interpolation). A unit is flagged ``"above"`` when its count ``x`` exceeds
    the 99.8 % upper count limit and ``"below"`` when it falls short of the
    lower one — at most 0.1 % chance in each tail for a unit whose true rate is
    the target (Spiegelhalter 2005, Statistics in Medicine 24:1185–1202, uses
    the same 99.8 % level as its outer limits — from memory). Units with fewer
    than ``min_jobs`` jobs are never flagged: their limits are so wide that a
    flag would say nothing, and a flag on three jobs reads as a verdict.

    Parameters
    ----------
    units : sequence of (key, label, numerator, denominator)
        ``key`` (str or int) must be unique; ``label`` is what the sentence
        names ("operator A. Smith", "rotor type TFB-CF-1250").
    overall_p : float, optional
        Target rate in [0, 1] (e.g. the whole shop's rate when ``units`` is a
        subset); default the pooled rate of ``units``.
    nouns : (str, str), optional
        Singular and plural of what the numerator counts, for the sentences
        (``("rework", "reworks")``).
    min_jobs : int, optional
        Fewest jobs for a flag (default :data:`MIN_FUNNEL_JOBS` = 5).

    Returns
    -------
    Funnel
        Each unit's ``sentence`` reads e.g. "rotor type TFB-CF-1250: 7 reworks
        in 30 jobs, above what chance explains".

    Raises
    ------
    StatisticsInputError
        Empty ``units``; a unit not a 4-tuple; repeated key; bad counts;
        ``overall_p`` outside [0, 1]; ``min_jobs`` below 1; bad ``nouns``.
    """
    rows = _nonempty("units", units)
    target_given = None if overall_p is None else _proportion("overall_p", overall_p)
    floor = _count("min_jobs", min_jobs)
    if floor < 1:
        raise StatisticsInputError("min_jobs", "must be at least 1")
    if (
        not isinstance(nouns, tuple)
        or len(nouns) != 2
        or not all(isinstance(w, str) and w for w in nouns)
    ):
        raise StatisticsInputError("nouns", "give (singular, plural), two non-empty words")
    parsed: list[tuple[Key, str, int, int]] = []
    seen: set[Key] = set()
    for i, row in enumerate(rows):
        where = f"units[{i}]"
        if not isinstance(row, tuple | list) or len(row) != 4:
            raise StatisticsInputError(where, "must be (key, label, numerator, denominator)")
        key, label, num, den = row
        if isinstance(key, bool) or not isinstance(key, str | int):
            raise StatisticsInputError(f"{where}.key", "must be a string or an integer")
        if key in seen:
            raise StatisticsInputError(f"{where}.key", f"{key!r} appears more than once")
        seen.add(key)
        if not isinstance(label, str):
            raise StatisticsInputError(f"{where}.label", "must be a string")
        x, n = _pair(f"{where}.", num, den)
        parsed.append((key, label, x, n))

    overall = Rate(sum(r[2] for r in parsed), sum(r[3] for r in parsed))
    target = target_given if target_given is not None else overall.value
    with_jobs = np.array(sorted({n for *_, n in parsed if n > 0}), dtype=int)
    limits_by_n = (
        {lim.n: lim for lim in _limits_for(target, with_jobs)}
        if target is not None and with_jobs.size
        else {}
    )
    out: list[FunnelUnit] = []
    for key, label, x, n in parsed:
        lim = limits_by_n.get(n)
        flag: Side | None = None
        counted = f"{label}: {x} {nouns[0] if x == 1 else nouns[1]} in {_jobs(n)}"
        if n == 0:
            sentence = f"{label}: no jobs"
        elif lim is None:
            sentence = f"{counted}, no overall rate to compare with"
        elif n < floor:
            sentence = f"{counted}, too few jobs to judge (fewer than {floor})"
        else:
            low, high = lim.counts_99_8
            if x > high:
                flag = "above"
            elif x < low:
                flag = "below"
            where_words = {
                "above": "above what chance explains",
                "below": "below what chance explains",
                None: "within what chance explains",
            }[flag]
            sentence = f"{counted}, {where_words}"
        out.append(FunnelUnit(key, label, Rate(x, n), lim, flag, sentence))
    return Funnel(overall, target, tuple(out), floor)


# -------------------------------------------------------------------- p-chart


@dataclass(frozen=True)
class PChartPoint:
    """One month on a p-chart. ``lcl``/``ucl`` are ``None`` for a month without jobs."""

    label: str
    rate: Rate
    lcl: float | None
    ucl: float | None
    outside: Side | None
    in_run: bool

    def as_json(self) -> dict[str, Any]:
        """``{"label", "rate", "lcl", "ucl", "outside", "in_run"}``."""
        return {
            "label": self.label,
            "rate": self.rate.as_json(),
            "lcl": self.lcl,
            "ucl": self.ucl,
            "outside": self.outside,
            "in_run": self.in_run,
        }


@dataclass(frozen=True)
class RunOnOneSide:
    """A run of points on one side of the centre line: indices into the months."""

    side: Side
    first: int
    last: int
    length: int

    def as_json(self) -> dict[str, Any]:
        """``{"side", "first", "last", "length"}``; first/last index the months given."""
        return {"side": self.side, "first": self.first, "last": self.last, "length": self.length}


@dataclass(frozen=True)
class PChart:
    """Result of :func:`p_chart`. ``centre`` is ``None`` when no month has jobs."""

    centre: float | None
    points: tuple[PChartPoint, ...]
    runs: tuple[RunOnOneSide, ...]
    run_length: int

    def as_json(self) -> dict[str, Any]:
        """JSON-ready dict: centre, run_length, points, runs and :data:`CAUTION`."""
        return {
            "centre": self.centre,
            "run_length": self.run_length,
            "caution": CAUTION,
            "points": [p.as_json() for p in self.points],
            "runs": [r.as_json() for r in self.runs],
        }


def p_chart(
    months: Sequence[tuple[str, int, int]], *, run_length: int = RUN_LENGTH
) -> PChart:
    """p-chart (control chart for a share) over months, with a run rule.

    Centre line, the pooled rate over all months, and per-month 3-sigma limits
    (Shewhart's p-chart with variable sample size; Montgomery, *Introduction to
    Statistical Quality Control*, ch. on control charts for attributes — from
    memory)::

        p̄ = Σxᵢ / Σnᵢ,   LCLᵢ, UCLᵢ = p̄ ∓ 3·√( p̄(1 − p̄) / nᵢ ),  clipped to [0, 1]

    A month is ``outside`` when its rate is strictly above UCL or below LCL.
    Limits and centre come from the same months (a "phase I" chart), so a
    long drift partly hides itself in p̄; the run rule catches what it leaves.

    Run rule: ``run_length`` (default 8) or more consecutive points strictly on
    one side of the centre line — the Western Electric handbook's "eight in a
    row" rule (Western Electric, *Statistical Quality Control Handbook*, 1956;
    Nelson's 1984 rule 2 uses nine — both from memory). A point exactly on the
    centre line ends a run; a month without jobs is no point and neither ends
    nor extends a run. Each maximal run is reported once and its points get
    ``in_run = True``.

    The 3-sigma limits lean on the normal approximation, which is rough when
    ``nᵢ·p̄`` is small; for few jobs per month prefer :func:`funnel`.

    Parameters
    ----------
    months : sequence of (label, numerator, denominator)
        In time order.
    run_length : int, optional
        Points in a row that make a run, ≥ 2 (default :data:`RUN_LENGTH`).

    Returns
    -------
    PChart

    Raises
    ------
    StatisticsInputError
        Empty ``months``, a month not a 3-tuple, bad counts, bad ``run_length``.
    """
    rows = _nonempty("months", months)
    length = _count("run_length", run_length)
    if length < 2:
        raise StatisticsInputError("run_length", "must be at least 2")
    parsed: list[tuple[str, int, int]] = []
    for i, row in enumerate(rows):
        where = f"months[{i}]"
        if not isinstance(row, tuple | list) or len(row) != 3:
            raise StatisticsInputError(where, "must be (label, numerator, denominator)")
        label, num, den = row
        if not isinstance(label, str):
            raise StatisticsInputError(f"{where}.label", "must be a string")
        x, n = _pair(f"{where}.", num, den)
        parsed.append((label, x, n))

    total_x = sum(x for _, x, _ in parsed)
    total_n = sum(n for _, _, n in parsed)
    centre = total_x / total_n if total_n else None

    rates = [Rate(x, n) for _, x, n in parsed]
    limits: list[tuple[float | None, float | None]] = []
    sides: list[Side | None] = []
    outside: list[Side | None] = []
    for r in rates:
        if centre is None or r.value is None:
            limits.append((None, None))
            sides.append(None)
            outside.append(None)
            continue
        half = 3.0 * math.sqrt(centre * (1.0 - centre) / r.denominator)
        lcl, ucl = max(0.0, centre - half), min(1.0, centre + half)
        limits.append((lcl, ucl))
        sides.append("above" if r.value > centre else "below" if r.value < centre else None)
        outside.append("above" if r.value > ucl else "below" if r.value < lcl else None)

    runs: list[RunOnOneSide] = []
    current: list[int] = []
    current_side: Side | None = None

    def close() -> None:
        if current_side is not None and len(current) >= length:
            runs.append(RunOnOneSide(current_side, current[0], current[-1], len(current)))

    for i, r in enumerate(rates):
        if r.value is None or centre is None:
            continue  # a month without jobs is no point
        side = sides[i]
        if side is not None and side == current_side:
            current.append(i)
            continue
        close()
        current, current_side = ([i], side) if side is not None else ([], None)
    close()
    in_run = {i for run in runs for i in range(run.first, run.last + 1)}

    points = tuple(
        PChartPoint(
            label, rates[i], limits[i][0], limits[i][1], outside[i],
            i in in_run and rates[i].value is not None,
        )
        for i, (label, _, _) in enumerate(parsed)
    )
    return PChart(centre, points, tuple(runs), length)


