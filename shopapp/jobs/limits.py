"""What the machine and the rotor permit: the rotor's mass on the machine, the speed of a
spin and the kind of reading the machine gives.

One home for the rules that book-in (:mod:`shopapp.jobs.intake`) and every run
(:mod:`shopapp.jobs.runs`) share, so a run can never be logged at a speed the booking
would have refused. Messages name the form field and carry the safety caution.
"""

from __future__ import annotations

from shopapp.balancing.influence import TRIAL_MASS_CAUTIONS, trial_force
from shopapp.core.checks import Errors
from shopapp.core.display import plain, quantity
from shopapp.models import CALIBRATED_READING_UNIT, Machine, RotorType, Run

OVER_SPEED_CAUTION = (
    "Over-speed can burst the rotor or throw its masses: never exceed the rotor maker's "
    "permitted speed or the balancing machine maker's limits; local codes come first."
)


def check_machine_capacity(e: Errors, machine: Machine, *, mass_kg: float) -> None:
    """Refuse a rotor outside the machine's mass range (field ``machine_id``)."""
    if not machine.min_mass_kg <= mass_kg <= machine.max_mass_kg:
        e.add("machine_id", f"{machine.name} takes rotors of {plain(machine.min_mass_kg)}–"
              f"{plain(machine.max_mass_kg)} kg; this rotor is {plain(mass_kg)} kg")


def permitted_speed_rpm(rotor_type: RotorType, service_speed_rpm: float) -> float:
    """The highest speed the rotor may be spun at: its permitted balancing speed (the
    rotor type's, or its service speed when blank), and never above the job's service speed."""
    return min(rotor_type.permitted_speed_rpm, service_speed_rpm)


def highest_speed_rpm(machine: Machine | None, rotor_type: RotorType,
                      service_speed_rpm: float) -> float:
    """The highest speed a run of this job may have: the rotor's and the machine's limit."""
    limit = permitted_speed_rpm(rotor_type, service_speed_rpm)
    return limit if machine is None else min(limit, machine.max_speed_rpm)


def check_speed(e: Errors, field: str, speed_rpm: float, *, machine: Machine | None,
                rotor_type: RotorType, service_speed_rpm: float) -> None:
    """Refuse a speed outside the machine's range or above the rotor's permitted speed.

    ``field`` names the form field the message goes beside (``balancing_speed_rpm`` at
    book-in, ``speed_rpm`` for a run).
    """
    if machine is not None and not machine.min_speed_rpm <= speed_rpm <= machine.max_speed_rpm:
        e.add(field, f"{machine.name} runs at {plain(machine.min_speed_rpm)}–"
              f"{quantity(machine.max_speed_rpm, 'rpm')}; {plain(speed_rpm)} rpm is "
              f"outside that range. {OVER_SPEED_CAUTION}")  # as typed: 1.5, not "2 rpm"
        return
    limit = permitted_speed_rpm(rotor_type, service_speed_rpm)
    if speed_rpm > limit:
        if rotor_type.permitted_balancing_speed_rpm is not None and \
                limit == rotor_type.permitted_balancing_speed_rpm:
            why = "the rotor type's permitted balancing speed"
        else:
            why = "the rotor's service speed (no permitted balancing speed is recorded)"
        e.add(field, f"{plain(speed_rpm)} rpm is above {why}, "
              f"{quantity(limit, 'rpm')}. {OVER_SPEED_CAUTION}")


def check_reading_unit(e: Errors, unit: str, machine: Machine | None) -> None:
    """Refuse readings in another unit than the machine gives (field ``unit``).

    A vibration reading logged as calibrated g·mm would be judged against U_per as if it
    were unbalance: a verdict without meaning. There is no override (README, "Runs").
    """
    if machine is None or unit == machine.reading_unit:
        return
    if unit == CALIBRATED_READING_UNIT:
        e.add("unit", f"{machine.name} reads vibration in {machine.reading_unit}, not calibrated "
              "unbalance: log the reading in its own unit (trial runs or stored influence "
              "coefficients turn it into unbalance)")
    else:
        e.add("unit", f"{machine.name} reads {machine.reading_unit}; a reading in {unit} is "
              "not what it shows — log the unit on its display (change the machine record if "
              "it is wrong)")


def check_reading_planes(e: Errors, field: str, planes: int, machine: Machine | None) -> None:
    """Refuse a rotor with more correction planes than the machine reads in one run."""
    if machine is not None and planes > machine.reading_planes:
        e.add(field, f"{machine.name} reads {machine.reading_planes} plane per run; "
              f"this rotor needs {planes}: balance it on a two-plane machine")


# A trial mass is sized to pull about 5–10 % of the static load per plane (common practice,
# no source); past half of it the run was very likely typed wrong (kg for g, a slipped
# digit) or the mass is dangerous at that speed.
TRIAL_FORCE_WARNING_FRACTION = 0.5


def trial_force_warning(run: Run, rotor_type: RotorType) -> str | None:
    """A caution for a logged trial run whose trial mass pulls more than half the static
    load per plane at the run's speed; None otherwise (or for other runs)."""
    if run.purpose != "trial" or not run.trial_mass_g or not run.trial_radius_mm:
        return None
    force_n, load_n = trial_force(rotor_type.mass_kg, run.speed_rpm, run.trial_mass_g,
                                           run.trial_radius_mm, planes=rotor_type.planes)
    if force_n <= TRIAL_FORCE_WARNING_FRACTION * load_n:
        return None
    # Both forces in one unit, so they can be compared at a glance (0.199 kN against 108 N
    # could not).
    unit, scale = ("kN", 1000.0) if max(force_n, load_n) >= 1000.0 else ("N", 1.0)
    return (f"Check the trial mass of run {run.seq}: {plain(run.trial_mass_g)} g at "
            f"{plain(run.trial_radius_mm)} mm and {plain(run.speed_rpm)} rpm pulls "
            f"{quantity(force_n / scale, unit)}, {quantity(100.0 * force_n / load_n, '%')} "
            f"of the {quantity(load_n / scale, unit)} static load per plane (a trial mass "
            "usually pulls "
            f"5–10 %). Do not spin it again until the mass is confirmed. "
            + " ".join(TRIAL_MASS_CAUTIONS))
