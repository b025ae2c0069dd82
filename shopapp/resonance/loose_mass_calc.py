"""The self-centring (loose-mass) balancer calculator: check the inputs, run the numerics,
say the verdict in shop words. Stores nothing.

The model and its sources are in :mod:`shopapp.balancing.loose_mass_model` and
:mod:`shopapp.balancing.loose_mass`. This module adds the calculator's caps (ours,
to keep a page answer within a few seconds of CPU; no source): at most
:data:`MAX_BALLS` masses (lump fine beads into up to 12 equal masses), speeds up
to :data:`MAX_SPEED_RPM`, the operating speed at most :data:`MAX_SPEED_RATIO` ×
the support's natural frequency, support damping and drag ratios not below
:data:`MIN_RATIO` (a very lightly damped run takes much longer to simulate),
and the simulated run (ramp + hold) limited to about :data:`REVOLUTION_BUDGET`
natural periods × speed ratio: when the default hold at speed would be longer
it is shortened and a note says so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from shopapp.balancing.errors import BalancingInputError
from shopapp.core.checks import Errors
from shopapp.core.checks import number as check_number
from shopapp.core.display import number, quantity
from shopapp.core.errors import ValidationFailed
from shopapp.core.permissions import require
from shopapp.models import User

if TYPE_CHECKING:
    from shopapp.balancing import loose_mass as lm

MAX_BALLS = 12
MAX_SPEED_RPM = 100_000.0
MAX_SPEED_RATIO = 8.0
MIN_RATIO = 0.02
MAX_DRAG_RATIO = 2.0
MAX_RAMP_PERIODS = 200.0
REVOLUTION_BUDGET = 2000.0  # (ramp/2 + hold) in natural periods × speed ratio


@dataclass(frozen=True)
class LooseMassCheck:
    """The calculator's answer: the numerics' result and curves, verdict sentences,
    notes on the calculator's own choices, warnings and cautions."""

    result: lm.LooseMassResult
    curves: lm.LooseMassCurves
    verdict: tuple[str, ...]
    verdict_state: str  # works | not_here | cannot
    natural_frequency_rpm: float
    notes: tuple[str, ...]
    warnings: tuple[str, ...]
    cautions: tuple[str, ...]


def _rpm(v: float) -> str:
    return quantity(v, "rpm")


def _inputs(e: Errors, raw: dict[str, Any]) -> dict[str, Any]:
    def num(name: str, required: bool = True, **rule: Any) -> float | None:
        return check_number(e, name, raw.get(name), required=required, **rule)

    out: dict[str, Any] = {
        "rotor_mass_kg": num("rotor_mass_kg", above=0.0, maximum=100_000.0, unit="kg"),
        "unbalance_gmm": num("unbalance_gmm", False, above=0.0, maximum=1e9, unit="g·mm"),
        "eccentricity_um": num("eccentricity_um", False, above=0.0, maximum=10_000.0,
                               unit="µm"),
        "natural_frequency_hz": num("natural_frequency_hz", False, above=0.0, maximum=1000.0,
                                    unit="Hz"),
        "stiffness_n_per_m": num("stiffness_n_per_m", False, above=0.0, maximum=1e12,
                                 unit="N/m"),
        "damping_ratio": num("damping_ratio", minimum=MIN_RATIO, maximum=0.95),
        "ball_mass_g": num("ball_mass_g", above=0.0, maximum=100_000.0, unit="g"),
        "race_radius_mm": num("race_radius_mm", above=0.0, maximum=5000.0, unit="mm"),
        "drag_ratio": num("drag_ratio", minimum=MIN_RATIO, maximum=MAX_DRAG_RATIO),
        "rolling_resistance": num("rolling_resistance", False, minimum=0.0, maximum=0.5),
        "speed_rpm": num("speed_rpm", above=0.0, maximum=MAX_SPEED_RPM, unit="rpm"),
        "max_speed_rpm": num("max_speed_rpm", False, above=0.0, maximum=MAX_SPEED_RPM,
                             unit="rpm"),
        "ramp_time_s": num("ramp_time_s", False, above=0.0, maximum=3600.0, unit="s"),
    }
    balls = raw.get("ball_count")
    count = check_number(e, "ball_count", balls, minimum=1.0, maximum=MAX_BALLS)
    if count is not None and count != int(count):
        e.add("ball_count", "must be a whole number")
    out["ball_count"] = None if count is None else int(count)
    if "unbalance_gmm" not in e and "eccentricity_um" not in e and (
        (out["unbalance_gmm"] is None) == (out["eccentricity_um"] is None)
    ):
        e.add("unbalance_gmm", "give the unbalance or the eccentricity (one of them)")
    if "natural_frequency_hz" not in e and "stiffness_n_per_m" not in e and (
        (out["natural_frequency_hz"] is None) == (out["stiffness_n_per_m"] is None)
    ):
        e.add("natural_frequency_hz", "give the natural frequency or the stiffness (one of them)")
    return out


def _hold_s(b: lm.LooseMassBalancer, speed: float, ramp_s: float) -> tuple[float | None, str]:
    """The hold at speed within the budget (None = the numerics' default) and a note."""
    from shopapp.balancing import loose_mass as lm

    period = 1.0 / b.natural_frequency_hz
    ratio = speed / (b.natural_frequency_hz * 60.0)
    hold_periods = lm.MIN_HOLD_PERIODS
    if b.capacity_ratio >= 1.0:
        try:
            check = lm.balanced_state_stability(b, speed)
        except BalancingInputError:
            check = None
        if check is not None and check.settle_estimate_s is not None:
            hold_periods = max(hold_periods, 3.0 * check.settle_estimate_s / period)
    hold_periods = min(hold_periods, lm.MAX_HOLD_PERIODS)
    budget = max(lm.MIN_HOLD_PERIODS, REVOLUTION_BUDGET / ratio - 0.5 * ramp_s / period)
    if hold_periods <= budget:
        return None, ""
    hold = budget * period
    return hold, (f"To keep this page quick the simulated time at speed was cut to "
                  f"{quantity(hold, 's')}; the masses may settle later than shown.")


def _band_words(bands: list[tuple[float, float]], speed: float, bottom: float,
                limit: float) -> tuple[str, bool]:
    """The sentence on where the balancer settles, and whether ``speed`` is in a band."""
    if not bands:
        return (f"No speed up to {_rpm(limit)} where the masses settle into balance.", False)
    here = next(((lo, hi) for lo, hi in bands if lo <= speed <= hi), None)
    lo, hi = here if here is not None else bands[-1]
    tail = (f" (checked up to {_rpm(limit)}, where the scan stopped)"
            if hi >= limit * (1 - 1e-6) else f"; above {_rpm(hi)} it no longer settles")
    if lo <= bottom * 1.01:
        start = f"Settles from standstill up to {_rpm(hi)}"
        sentence = start + ("" if hi < limit * (1 - 1e-6) else tail) + "."
    else:
        sentence = (f"Settles above {_rpm(lo)}{tail}; below that it makes the unbalance worse.")
    if here is None:
        spans = ", ".join(f"{_rpm(a)} to {_rpm(b)}" for a, b in bands)
        sentence = (f"At {_rpm(speed)} it will not balance: the masses do not settle there. "
                    f"They settle only between {spans}.")
    return sentence, here is not None


def check_loose_mass(*, by: User, **raw: Any) -> LooseMassCheck:
    """Check a loose-mass balancer at an operating speed (inputs as typed; None = empty).

    Keys: ``rotor_mass_kg``, ``unbalance_gmm`` or ``eccentricity_um``,
    ``natural_frequency_hz`` or ``stiffness_n_per_m``, ``damping_ratio``,
    ``ball_count``, ``ball_mass_g``, ``race_radius_mm``, ``drag_ratio``,
    ``rolling_resistance`` (optional), ``speed_rpm``, ``max_speed_rpm`` (end of the
    stability scan, optional), ``ramp_time_s`` (optional). Raises
    :class:`ValidationFailed` naming every bad field.
    """
    from shopapp.balancing import loose_mass as lm  # scipy: imported on use

    require(by, "read")
    e = Errors()
    v = _inputs(e, raw)
    e.raise_if_any()
    try:
        b = lm.loose_mass_balancer(
            v["rotor_mass_kg"], v["unbalance_gmm"], eccentricity_um=v["eccentricity_um"],
            damping_ratio=v["damping_ratio"], ball_count=v["ball_count"],
            ball_mass_g=v["ball_mass_g"], race_radius_mm=v["race_radius_mm"],
            drag_ratio=v["drag_ratio"], natural_frequency_hz=v["natural_frequency_hz"],
            stiffness_n_per_m=v["stiffness_n_per_m"],
            rolling_resistance=v["rolling_resistance"] or 0.0,
        )
    except BalancingInputError as exc:
        raise ValidationFailed(exc.field, exc.message) from None
    fn_rpm = b.natural_frequency_hz * 60.0
    speed = float(v["speed_rpm"])
    if speed > MAX_SPEED_RATIO * fn_rpm:
        e.add("speed_rpm", f"at most {number(MAX_SPEED_RATIO)} × the support's natural frequency "
                           f"({_rpm(MAX_SPEED_RATIO * fn_rpm)}) in this calculator")
    if speed < 0.05 * fn_rpm:
        e.add("speed_rpm", f"at least 5 % of the support's natural frequency "
                           f"({_rpm(0.05 * fn_rpm)})")
    scan = v["max_speed_rpm"]
    if scan is not None and scan > MAX_SPEED_RATIO * fn_rpm * 2:
        e.add("max_speed_rpm", f"at most {_rpm(2 * MAX_SPEED_RATIO * fn_rpm)} here")
    if scan is not None and scan <= 0.05 * fn_rpm:
        e.add("max_speed_rpm", "must be above 5 % of the support's natural frequency "
                               f"({_rpm(0.05 * fn_rpm)})")
    ramp = v["ramp_time_s"]
    period = 1.0 / b.natural_frequency_hz
    if ramp is not None and ramp / period > MAX_RAMP_PERIODS:
        e.add("ramp_time_s", f"at most {quantity(MAX_RAMP_PERIODS * period, 's')} "
                             f"({number(MAX_RAMP_PERIODS)} natural periods) in this calculator")
    e.raise_if_any()
    hold, note = _hold_s(b, speed, ramp if ramp is not None else lm.DEFAULT_RAMP_PERIODS * period)
    try:
        res = lm.analyse_loose_mass(b, speed, ramp_time_s=ramp, hold_time_s=hold,
                                    max_speed_rpm=scan)
        curves = lm.loose_mass_curves(res)
    except BalancingInputError as exc:
        raise ValidationFailed(exc.field, exc.message) from None
    verdict, state = _verdict(res, fn_rpm)
    return LooseMassCheck(result=res, curves=curves, verdict=verdict, verdict_state=state,
                          natural_frequency_rpm=fn_rpm, notes=(note,) if note else (),
                          warnings=res.warnings, cautions=res.cautions)


def _verdict(res: lm.LooseMassResult, fn_rpm: float) -> tuple[tuple[str, ...], str]:
    b = res.balancer
    if not res.capacity_ok:
        return ((f"It cannot balance this rotor: the masses hold at most "
                 f"{quantity(b.capacity_gmm, 'g·mm')}, less than the unbalance "
                 f"{quantity(b.unbalance_gmm, 'g·mm')}. Balance the rotor first, or fit more "
                 "or heavier masses.",), "cannot")
    band, works = _band_words(res.stable_band_rpm, res.speed_rpm, 0.05 * fn_rpm,
                              res.scan_limit_rpm)
    lines = [band, f"Capacity {number(b.capacity_ratio, 2)}× the unbalance "
                   f"({quantity(b.capacity_gmm, 'g·mm')} against "
                   f"{quantity(b.unbalance_gmm, 'g·mm')})."]
    at = _rpm(res.speed_rpm)
    if res.settle_time_s is not None:
        lines.append(f"Expected residual {quantity(res.residual_gmm, 'g·mm')} about "
                     f"{quantity(res.settle_time_s, 's')} after start at {at}: whirl "
                     f"{quantity(res.whirl_end_um, 'µm')}, against "
                     f"{quantity(res.whirl_without_balancer_um, 'µm')} without the balancer.")
    else:
        lines.append(f"The masses had not settled by the end of the simulated run; the "
                     f"residual was then {quantity(res.residual_gmm, 'g·mm')} (whirl "
                     f"{quantity(res.whirl_end_um, 'µm')}, against "
                     f"{quantity(res.whirl_without_balancer_um, 'µm')} without the balancer).")
    if res.dead_band_gmm is not None:
        lines.append(f"Rolling resistance leaves up to about {quantity(res.dead_band_gmm, 'g·mm')}"
                     " unbalanced.")
    if math.isclose(res.speed_ratio, 1.0, abs_tol=0.2):
        lines.append(f"The operating speed is close to the support's resonance "
                     f"({_rpm(fn_rpm)}).")
    return tuple(lines), "works" if works and res.balanced_state_stable else "not_here"
