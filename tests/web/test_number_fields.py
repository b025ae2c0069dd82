"""Typed numbers (shopapp.core.forms): one home, and a magnitude is never changed.

Common practice, no source: continental shops write 1,5 for one and a half, English-speaking
ones 1,500 for fifteen hundred; 1.234,5 and 1,234.5 group thousands with the other mark.
Whatever cannot be told apart is refused with a message, never guessed.
"""

from __future__ import annotations

import pytest
from flask_wtf import FlaskForm
from werkzeug.datastructures import MultiDict

from shopapp.core.forms import AngleField, NumberField, parse_number


class _Form(FlaskForm):
    class Meta:
        csrf = False  # a bare field check, no request behind it

    value = NumberField("Value")
    angle = AngleField("Angle")


def _form(app, **data: str) -> _Form:
    with app.test_request_context():
        form = _Form(formdata=MultiDict(data))
        form.validate()
        return form


@pytest.mark.parametrize(("typed", "value"), [
    ("1.5", 1.5),
    ("1,5", 1.5),  # decimal comma: the same magnitude, never 15
    ("-1,5", -1.5),
    ("0,125", 0.125),  # a leading 0 cannot be a thousands group
    ("12,25", 12.25),
    ("1500", 1500.0),
])
def test_numbers_keep_their_magnitude(typed: str, value: float) -> None:
    assert parse_number(typed) == value


@pytest.mark.parametrize(("typed", "says"), [
    ("1.234,5", "thousands separator"),
    ("1,234.5", "thousands separator"),
    ("1,234,567", "thousands separator"),
    ("1 500", "without spaces"),
    ("1\u00a0500", "without spaces"),  # a no-break space from a spreadsheet
    ("1_5", "without spaces"),  # Python's float() reads this as 15
    ("1,500", "could be 1.500 or 1500"),
    ("nan", "finite"),
    ("inf", "finite"),
    ("1e999", "finite"),
    ("12 kg", "without spaces"),
    ("abc", "Not a number"),
])
def test_ambiguous_or_junk_numbers_are_refused(typed: str, says: str) -> None:
    with pytest.raises(ValueError, match=says):
        parse_number(typed)


def test_the_field_shows_the_message_beside_itself(app) -> None:
    form = _form(app, value="1.234,5", angle="10")
    assert form.value.data is None and "thousands separator" in form.value.errors[0]
    assert _form(app, value="1,5", angle="10").value.data == 1.5


@pytest.mark.parametrize(("typed", "value"), [("0", 0.0), ("359,5", 359.5), ("360", 360.0)])
def test_angles_within_a_turn_are_kept(app, typed: str, value: float) -> None:
    form = _form(app, angle=typed)
    assert form.angle.data == value and not form.angle.errors


@pytest.mark.parametrize(("typed", "wrapped"), [("400", "40"), ("-10", "350"), ("720", "0")])
def test_angles_outside_a_turn_are_refused_not_wrapped(app, typed: str, wrapped: str) -> None:
    form = _form(app, angle=typed)
    assert form.angle.data is None
    assert "outside 0–360°" in form.angle.errors[0]
    assert f"not wrapped to {wrapped}°" in form.angle.errors[0]


def test_number_inputs_reach_the_server_as_typed(app) -> None:
    # A browser's type="number" input drops "41,5" to 415 or "abc" to "" under an English
    # locale (HTML's valid floating-point number has no comma), so the server's decimal-comma
    # rule never saw it. The field is a text input with a decimal keypad instead.
    with app.test_request_context():
        form = _Form(formdata=None)
        html = str(form.value()) + str(form.angle())
    assert 'type="number"' not in html
    assert html.count('type="text"') == 2 and html.count('inputmode="decimal"') == 2


@pytest.mark.parametrize("typed", ["1e-400", "-1e-400", "0.1e-330", "2e-324"])
def test_a_typed_non_zero_that_underflows_to_zero_is_refused(typed: str) -> None:
    # Before: "1e-400" was read as 0 (a typed non-zero value silently became zero)
    # while "1e400" was refused. IEEE 754 doubles: the smallest positive subnormal is
    # about 4.9e-324, anything smaller rounds to 0 (common practice, no source).
    with pytest.raises(ValueError, match="too small to represent"):
        parse_number(typed)


@pytest.mark.parametrize("typed", ["0", "0.0", "-0", "0,0", "0e5", "-0.000"])
def test_a_typed_zero_stays_zero(typed: str) -> None:
    assert parse_number(typed) == 0.0


def test_the_underflow_message_names_the_field(app) -> None:
    form = _form(app, value="1e-400", angle="10")
    assert form.value.data is None
    assert form.value.errors == ["Value: '1e-400' is too small to represent (it would be "
                                 "stored as 0); type 0 for zero or use a larger unit."]


def test_a_use_case_check_refuses_a_typed_number_that_underflows() -> None:
    # Forms hand what parse_number refused on to the use-case unchanged (the traceability
    # forms do); float("1e-400") there was 0.0 and was saved as zero.
    from shopapp.core.checks import Errors, number

    e = Errors()
    assert number(e, "start_deg", "1e-400") is None
    assert e == {"start_deg": "is too small to represent, got '1e-400' (it would be stored "
                              "as 0)"}
    ok = Errors()
    assert number(ok, "start_deg", "-0") == 0.0 and not ok


def test_a_refused_choice_with_nothing_to_choose_says_so(app) -> None:
    # The walk: a new customer has no rotor types yet; a tampered rotor type answered
    # "Not one of the choices; choose one of: ." (an empty list).
    from shopapp.core.forms import ChoiceField

    class _Pick(FlaskForm):
        class Meta:
            csrf = False

        rotor_type_id = ChoiceField("Rotor type", coerce=int,
                                    choices=[(0, "— none: one-off geometry —")])

    with app.test_request_context():
        form = _Pick(formdata=MultiDict({"rotor_type_id": "-5"}))
        assert not form.validate()
    assert form.rotor_type_id.errors == ["Not one of the choices: there is nothing to choose "
                                         "from here yet."]
