"""Balance errors: how sure is a residual reading, and what verdict does it allow.

Idea of ISO 21940-14 (assessment of balance errors), from memory — the
standard's own procedures and tables are not reproduced:

* the **random error** comes from the scatter of repeated check runs made
  without touching the rotor (stop, restart, read again). Here it is the
  **scatter radius**: the largest distance of the readings from their mean,
  ``e_rand = max_k |U_k − mean(U)|`` (g·mm). It is a plain, conservative
  figure for the small numbers of runs a shop makes (no distribution assumed);
  the RMS distance is reported alongside for information. At least
  :data:`MIN_RUNS` runs are needed (judgement: two runs give one distance and
  no scatter worth the name);
* **systematic errors** the shop knows of are added: the arbor error when it
  was not subtracted, an uncompensated key-convention correction, any other
  stated one;
* the **error estimate** per plane is the arithmetic sum
  ``ΔU = e_rand + Σ |e_sys,j|`` — a conservative bound (the errors may add in
  phase); a root-sum-square figure would be smaller and assumes independent
  random phases;
* **verdict right after balancing**: the residual ``U_res`` passes when
  ``U_res ≤ U_per − ΔU`` (from memory of ISO 21940-14's idea: the measured
  residual must leave room for the error of the measurement);
* **negligible errors**: when ``ΔU ≤ 10 %`` of the limit it may be neglected
  and the verdict is ``U_res ≤ U_per`` (threshold :data:`NEGLIGIBLE_FRACTION`;
  common practice / judgement, in line with the 10 % the standard's idea is
  remembered to use).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from shopapp.balancing.checks import finite_array, non_negative, positive
from shopapp.balancing.errors import BalancingInputError

MIN_RUNS = 3
NEGLIGIBLE_FRACTION = 0.10

# Printed on certificates: the method is cited; that the rule is quoted from memory of
# ISO 21940-14 stays here and in the module docstring.
RULE_WITH_ERRORS = "U_res ≤ U_per − ΔU (after ISO 21940-14)"


@dataclass(frozen=True)
class RandomError:
    """Scatter of repeated readings of one plane (g·mm).

    ``radius_gmm`` is the largest distance from the mean (the random error used);
    ``rms_gmm`` the root-mean-square distance (information only).
    """

    runs: int
    mean_gmm: complex
    radius_gmm: float
    rms_gmm: float


@dataclass(frozen=True)
class ErrorEstimate:
    """``ΔU`` of one plane and what it is made of (g·mm)."""

    random_gmm: float
    systematic_gmm: dict[str, float]
    delta_u_gmm: float


@dataclass(frozen=True)
class ErrorVerdict:
    """Residual of one plane judged with its error estimate.

    ``effective_limit_gmm`` is ``U_per − ΔU`` (or ``U_per`` when ΔU is
    negligible); ``passed`` is False whenever ΔU leaves no room (``ΔU ≥ U_per``).
    """

    residual_gmm: float
    limit_gmm: float
    delta_u_gmm: float
    delta_u_fraction: float
    negligible: bool
    effective_limit_gmm: float
    passed: bool
    rule: str
    notes: tuple[str, ...]


def random_error(readings_gmm: Sequence[complex] | np.ndarray) -> RandomError:
    """Random error of one plane from repeated check runs without touching the rotor.

    ``e_rand = max_k |U_k − Ū|``, ``Ū = (1/n)·Σ U_k`` (module docstring; the
    choice of the scatter radius is ours, ISO 21940-14 idea from memory).

    Parameters
    ----------
    readings_gmm : sequence of complex
        The plane's unbalance reading of each run, g·mm (amplitude·e^{i·angle}).
    """
    z = finite_array("readings_gmm", readings_gmm).astype(complex)
    if z.ndim != 1:
        raise BalancingInputError("readings_gmm", "give one reading per run for one plane")
    if z.size < MIN_RUNS:
        raise BalancingInputError(
            "readings_gmm",
            f"at least {MIN_RUNS} repeated runs are needed to see the scatter; "
            f"given: {z.size}",
        )
    mean = complex(z.mean())
    dist = np.abs(z - mean)
    return RandomError(
        runs=int(z.size),
        mean_gmm=mean,
        radius_gmm=float(dist.max()),
        rms_gmm=float(math.sqrt(float(np.mean(dist**2)))),
    )


def error_estimate(
    random_gmm: float, systematic_gmm: Mapping[str, float] | None = None
) -> ErrorEstimate:
    """Error estimate of one plane, ``ΔU = e_rand + Σ |e_sys,j|`` (arithmetic sum).

    Conservative bound (module docstring; ISO 21940-14 idea from memory).

    Parameters
    ----------
    random_gmm : float
        Random error, g·mm, >= 0 (from :func:`random_error`).
    systematic_gmm : mapping of str to float, optional
        Named known systematic errors, g·mm (magnitudes; sign ignored).
    """
    rand = non_negative("random_gmm", random_gmm)
    parts: dict[str, float] = {}
    for name, value in (systematic_gmm or {}).items():
        v = finite_array(f"systematic_gmm.{name}", [value])
        if v.dtype.kind == "c":
            raise BalancingInputError(f"systematic_gmm.{name}", "give the magnitude, g·mm")
        parts[name] = abs(float(v[0]))
    return ErrorEstimate(
        random_gmm=rand, systematic_gmm=parts, delta_u_gmm=rand + sum(parts.values())
    )


def judge_with_errors(
    residual_gmm: float,
    limit_gmm: float,
    delta_u_gmm: float,
    *,
    negligible_fraction: float = NEGLIGIBLE_FRACTION,
) -> ErrorVerdict:
    """Verdict right after balancing: ``U_res ≤ U_per − ΔU``, or ``U_res ≤ U_per``
    when ``ΔU ≤ negligible_fraction · U_per``.

    Rule from memory of ISO 21940-14's idea; the 10 % threshold is common
    practice / judgement.

    Parameters
    ----------
    residual_gmm : float
        Residual unbalance of the plane, g·mm, >= 0.
    limit_gmm : float
        Permissible residual of the plane, g·mm, > 0.
    delta_u_gmm : float
        Error estimate ΔU of the plane, g·mm, >= 0.
    negligible_fraction : float
        ΔU / U_per at or below which ΔU is neglected (0.10).
    """
    res = non_negative("residual_gmm", residual_gmm)
    lim = positive("limit_gmm", limit_gmm)
    du = non_negative("delta_u_gmm", delta_u_gmm)
    frac_limit = non_negative("negligible_fraction", negligible_fraction)
    if frac_limit >= 1.0:
        raise BalancingInputError("negligible_fraction", "must be below 1")
    fraction = du / lim
    negligible = fraction <= frac_limit
    notes: list[str] = []
    if negligible:
        effective = lim
        rule = f"U_res ≤ U_per (ΔU ≤ {100 * frac_limit:.0f} % of U_per, neglected)"
        notes.append(
            f"ΔU is {100 * fraction:.1f} % of the limit (at most {100 * frac_limit:.0f} %): "
            "it may be neglected."
        )
    else:
        effective = lim - du
        rule = RULE_WITH_ERRORS
        if effective <= 0.0:
            notes.append(
                "ΔU is as large as the limit or larger: no reading can prove this tolerance; "
                "reduce the errors (repeatability, arbor, key) first."
            )
    passed = effective > 0.0 and res <= effective
    return ErrorVerdict(
        residual_gmm=res,
        limit_gmm=lim,
        delta_u_gmm=du,
        delta_u_fraction=fraction,
        negligible=negligible,
        effective_limit_gmm=max(effective, 0.0),
        passed=passed,
        rule=rule,
        notes=tuple(notes),
    )
