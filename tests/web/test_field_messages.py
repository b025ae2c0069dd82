"""WTForms' stock messages name the field they stand beside (shopapp.core.forms.ShopForm).

The walk: a customer's contact of 10 000 characters was refused with "Field cannot be
longer than 200 characters.", the dashboard's day with "Not a valid date value." and a
tampered period with "Not a valid choice." — none said which field or what it takes.
"""

from __future__ import annotations

import pytest
from werkzeug.datastructures import MultiDict
from wtforms import Form, FormField, SelectField, StringField
from wtforms.fields.choices import SelectChoice
from wtforms.validators import DataRequired, Length

from shopapp.core.forms import DayField, ShopForm


class _Part(Form):
    note = StringField("Part note", validators=[Length(max=5)])


class _Form(ShopForm):
    class Meta:
        csrf = False  # a bare field check, no request behind it

    contact = StringField("Contact", validators=[Length(max=20)])
    code = StringField("Code", validators=[Length(min=4, max=8)])
    reason = StringField("Why is this struck out?", validators=[DataRequired()])
    on = DayField("Containing the day")
    period = SelectField("Period", choices=[SelectChoice("week"), SelectChoice("month")])
    size = SelectField("Size", coerce=int, choices=[SelectChoice(1, "small"),
                                                    SelectChoice(2, "large")])
    part = FormField(_Part)


def _errors(app, **data: str) -> dict[str, list[str]]:
    base = {"contact": "Ann", "code": "abcd", "reason": "typo", "on": "2026-11-02",
            "period": "week", "size": "1"}
    with app.test_request_context():
        form = _Form(formdata=MultiDict({**base, **data}))
        form.validate()
        return {name: (field.errors if isinstance(field.errors, dict) else list(field.errors))
                for name, field in form._fields.items() if field.errors}


def test_a_too_long_text_names_the_field_its_limit_and_what_was_typed(app) -> None:
    assert _errors(app, contact="x" * 10_000) == {
        "contact": ["Contact cannot be longer than 20 characters (10000 typed)."]}


def test_a_too_short_text_names_the_field(app) -> None:
    assert _errors(app, code="ab") == {
        "code": ["Code must be between 4 and 8 characters long."]}


def test_a_required_field_names_itself_even_when_its_label_is_a_question(app) -> None:
    assert _errors(app, reason="") == {"reason": ["Reason is required."]}


@pytest.mark.parametrize("typed", ["2026-02-30", "abc", "9" * 60])
def test_a_date_that_is_not_one_names_the_field_and_the_form_it_takes(app, typed) -> None:
    assert _errors(app, on=typed) == {
        "on": ["Containing the day: not a date; type it as YYYY-MM-DD, e.g. 2026-11-03."]}


def test_a_field_inside_a_sub_form_names_itself(app) -> None:
    # The book-in form's one-off geometry is a sub-form: its container's messages cannot
    # be set (the first cut of this answered every booking with a 500).
    assert _errors(app, **{"part-note": "too long"}) == {
        "part": {"note": ["Part note cannot be longer than 5 characters (8 typed)."]}}


def test_a_refused_choice_names_the_field_and_its_choices(app) -> None:
    assert _errors(app, period="fortnight") == {
        "period": ["Period: not one of the choices; choose one of: week, month."]}


def test_the_dashboard_names_the_day_that_is_not_a_date(client, login_as) -> None:
    login_as("owner")
    resp = client.get("/dashboard?period=month&on=2026-02-30")
    assert resp.status_code == 422
    assert "Containing the day: not a date; type it as YYYY-MM-DD" in resp.get_data(as_text=True)


def test_a_customer_contact_too_long_names_the_field(client, login_as) -> None:
    login_as("operator")
    resp = client.post("/customers/new", data={"name": "Field Test Fans",
                                               "contact": "c" * 10_000})
    assert resp.status_code == 422
    assert "Contact person cannot be longer than 200 characters (10000 typed)." in resp.get_data(
        as_text=True)


def test_a_choice_that_is_not_even_a_number_names_the_field_and_its_choices(app) -> None:
    # WTForms says "Invalid Choice: could not coerce." when an id is not a whole number.
    assert _errors(app, size="1e309") == {
        "size": ["Size: not one of the choices; choose one of: small, large."]}


@pytest.mark.parametrize(("message", "shown"), [
    # a bare predicate takes the label as its subject
    ("is required", "Contact is required"),
    ("must be at most 10 kg, got 12", "Contact must be at most 10 kg, got 12"),
    # a clause of its own follows the label after a colon (the walk: "Unbalance, g·mm give
    # the unbalance or the eccentricity", "Readings ... one per line at least 5 readings
    # are needed")
    ("give the unbalance or the eccentricity (one of them)",
     "Contact: give the unbalance or the eccentricity (one of them)"),
    ("at least 5 readings are needed, got 0", "Contact: at least 5 readings are needed, got 0"),
    # a whole sentence is kept
    ("Give the shop's name.", "Give the shop's name."),
])
def test_a_use_case_message_beside_a_field_reads_as_a_sentence(app, message, shown) -> None:
    from shopapp.core.forms import field_message

    with app.test_request_context():
        form = _Form(formdata=MultiDict({}))
        assert field_message(form.contact, message) == shown


def test_the_loose_mass_page_says_which_figure_to_give(client, login_as) -> None:
    login_as("operator")
    resp = client.get("/resonance/loose-mass", query_string={"rotor_mass_kg": "12"})
    assert resp.status_code == 422
    assert "Unbalance, g·mm: give the unbalance or the eccentricity (one of them)" in (
        resp.get_data(as_text=True))
