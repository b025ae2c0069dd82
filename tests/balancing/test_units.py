"""Unit conversions against the exact definitions of the 1959 international yard
and pound agreement (1 in = 25.4 mm, 1 lb = 453.59237 g, 1 oz = 1/16 lb)."""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from shopapp.balancing import units
from shopapp.balancing.errors import BalancingInputError

# (converter, from, to, value, expected) — expected values written from the unit
# definitions, not from the code.
CASES = [
    # 1 oz·in = 28.349523125 g × 25.4 mm = 720.077887375 g·mm (1959 agreement)
    (units.convert_unbalance, "oz·in", "g·mm", 1.0, 720.077887375),
    (units.convert_unbalance, "g·in", "g·mm", 1.0, 25.4),  # 1 in = 25.4 mm
    (units.convert_unbalance, "g·cm", "g·mm", 1.0, 10.0),  # SI prefixes
    (units.convert_unbalance, "kg·m", "g·mm", 1.0, 1.0e6),  # SI prefixes
    (units.convert_unbalance, "g·mm", "oz·in", 720.077887375, 1.0),
    (units.convert_mass, "lb", "g", 1.0, 453.59237),  # 1959 agreement
    (units.convert_mass, "oz", "g", 1.0, 28.349523125),  # 1 oz = 1/16 lb
    (units.convert_mass, "lb", "oz", 1.0, 16.0),  # avoirdupois
    (units.convert_mass, "kg", "lb", 1.0, 1.0 / 0.45359237),
    (units.convert_speed, "rpm", "rad/s", 60.0, 2.0 * math.pi),  # 1 rev = 2π rad
    (units.convert_speed, "Hz", "rpm", 50.0, 3000.0),  # 1 Hz = 60 rpm
    (units.convert_speed, "rad/s", "Hz", 2.0 * math.pi, 1.0),
    (units.convert_length, "in", "mm", 1.0, 25.4),  # 1959 agreement
    (units.convert_length, "mm", "in", 254.0, 10.0),
]


@pytest.mark.parametrize(("convert", "src", "dst", "value", "expected"), CASES)
def test_conversion_matches_unit_definition(convert, src, dst, value, expected) -> None:
    assert_allclose(convert(value, src, dst), expected, rtol=1e-13)


def test_ascii_spellings_are_accepted() -> None:
    # Same definition as above: 1 oz·in = 720.077887375 g·mm.
    assert_allclose(units.convert_unbalance(1.0, "oz-in", "g*mm"), 720.077887375, rtol=1e-13)
    assert_allclose(units.convert_speed(1.0, "hz", "RPM"), 60.0, rtol=1e-13)
    assert_allclose(units.convert_speed(1.0, "rad_s", "rad/s"), 1.0)


def test_unit_tuples_list_every_accepted_unit() -> None:
    # Issue 3 item 9: the units the shop uses.
    assert set(units.UNBALANCE_UNITS) == {"g·mm", "g·cm", "kg·m", "g·in", "oz·in"}
    assert set(units.MASS_UNITS) == {"g", "kg", "oz", "lb"}
    assert set(units.SPEED_UNITS) == {"rpm", "Hz", "rad/s"}
    assert set(units.LENGTH_UNITS) == {"mm", "in"}


GROUPS = [
    (units.convert_unbalance, units.UNBALANCE_UNITS),
    (units.convert_mass, units.MASS_UNITS),
    (units.convert_speed, units.SPEED_UNITS),
    (units.convert_length, units.LENGTH_UNITS),
]


@given(
    group=st.sampled_from(GROUPS),
    data=st.data(),
    value=st.floats(min_value=-1e9, max_value=1e9, allow_nan=False),
)
def test_round_trip_returns_the_value(group, data, value) -> None:
    # Property (issue 3): converting there and back is the identity.
    convert, names = group
    a = data.draw(st.sampled_from(names))
    b = data.draw(st.sampled_from(names))
    back = convert(convert(value, a, b), b, a)
    assert back == pytest.approx(value, rel=1e-12, abs=1e-300)


@pytest.mark.parametrize("convert", [g[0] for g in GROUPS])
@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        ({"from_unit": "furlong"}, "from_unit"),
        ({"to_unit": "furlong"}, "to_unit"),
        ({"from_unit": 3}, "from_unit"),
        ({"value": float("nan")}, "value"),
        ({"value": float("inf")}, "value"),
        ({"value": "ten"}, "value"),
    ],
)
def test_bad_input_names_the_field(convert, kwargs, field) -> None:
    names = next(n for c, n in GROUPS if c is convert)
    args = {"value": 1.0, "from_unit": names[0], "to_unit": names[-1], **kwargs}
    with pytest.raises(BalancingInputError) as err:
        convert(**args)
    assert err.value.field == field


def test_unknown_unit_message_lists_the_known_units() -> None:
    with pytest.raises(BalancingInputError, match="oz·in"):
        units.convert_unbalance(1.0, "lb·ft", "g·mm")
