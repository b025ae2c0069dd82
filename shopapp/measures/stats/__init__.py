"""Statistics that tell signal from noise in the shop's measures (issue 17).

A pure module: plain numbers in, plain numbers (and JSON-ready dicts) out. No
database, no web, no files; numpy and scipy only. The database side collects the
counts (jobs reworked out of jobs finished, per operator, month, rotor type ...)
and hands them here.

What is here
------------
* :class:`Rate` / :func:`rate` — a share with its 95 % Wilson score interval.
* :func:`compare_rates` — did a rate get better or worse between two periods (or
  two slices)? Two-proportion z-test, Fisher's exact test for small expected
  counts, and a refusal for tiny samples.
* :func:`funnel` / :func:`funnel_curve` — funnel plot: each unit's rate against
  exact binomial control limits around the overall rate.
* :func:`p_chart` — monthly p-chart with 3-sigma limits and a run rule.
* :func:`trend` — least-squares line through a series, its slope's standard
  error and p-value, and whether the line reaches a limit before a given x.
* :func:`machine_time` — machine time of a job visit from its run timestamps.
* :func:`pareto` — counts sorted with cumulative percentages.
* :data:`CAUTION` — the sentence every page and PDF shows beside flags.

Every function checks its input and raises :class:`StatisticsInputError` (a
``ValueError``) naming the offending field; no result is ever NaN or infinite:
a share over zero jobs is ``None``.
"""

from __future__ import annotations

from shopapp.measures.stats.base import (
    CAUTION,
    DEFAULT_IDLE_SECONDS,
    FLAG_LEVEL,
    HIGHER_IS_BETTER,
    MAX_CURVE_POINTS,
    MIN_EXPECTED_COUNT,
    MIN_FUNNEL_JOBS,
    MIN_JOBS_TO_COMPARE,
    RUN_LENGTH,
    WARNING_LEVEL,
    Key,
    Side,
    StatisticsInputError,
)
from shopapp.measures.stats.funnels import (
    Funnel,
    FunnelLimits,
    FunnelUnit,
    PChart,
    PChartPoint,
    RunOnOneSide,
    funnel,
    funnel_curve,
    funnel_limits,
    funnel_limits_at,
    p_chart,
)
from shopapp.measures.stats.rates import (
    Comparison,
    Rate,
    TestName,
    Verdict,
    compare_rates,
    rate,
    wilson_interval,
)
from shopapp.measures.stats.series import (
    MachineTime,
    ParetoItem,
    Trend,
    machine_time,
    pareto,
    trend,
    trends,
)

__all__ = [
    "CAUTION",
    "DEFAULT_IDLE_SECONDS",
    "FLAG_LEVEL",
    "HIGHER_IS_BETTER",
    "MAX_CURVE_POINTS",
    "MIN_EXPECTED_COUNT",
    "MIN_FUNNEL_JOBS",
    "MIN_JOBS_TO_COMPARE",
    "RUN_LENGTH",
    "WARNING_LEVEL",
    "Comparison",
    "Funnel",
    "FunnelLimits",
    "FunnelUnit",
    "Key",
    "MachineTime",
    "PChart",
    "PChartPoint",
    "ParetoItem",
    "Rate",
    "RunOnOneSide",
    "Side",
    "StatisticsInputError",
    "TestName",
    "Trend",
    "Verdict",
    "compare_rates",
    "funnel",
    "funnel_curve",
    "funnel_limits",
    "funnel_limits_at",
    "machine_time",
    "p_chart",
    "pareto",
    "rate",
    "trend",
    "trends",
    "wilson_interval",
]
