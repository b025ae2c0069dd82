"""Every date a person can type stays inside the shop's date window (issue 12).

The window is ours (``shopapp.core.checks``): 1990-01-01 .. today, a little ahead where
the future makes sense (a list or dashboard period up to 366 days ahead, a promised date
up to about three years). Before, ``?on=0001-01-01`` and ``date_to=9999-12-31`` could
answer 500 (date arithmetic past year 9999 overflows in Python: ``datetime.date.max``
is 9999-12-31, Python documentation, datetime module) and a 1900 received date was stored.
"""

from __future__ import annotations

import datetime as dt

import pytest

from shopapp.core.checks import EARLIEST_DAY, day_refusal

TODAY = dt.date(2026, 12, 2)


@pytest.mark.parametrize(("day", "ahead", "refused"), [
    (dt.date(1989, 12, 31), 0, True),
    (dt.date(1990, 1, 1), 0, False),
    (TODAY, 0, False),
    (TODAY + dt.timedelta(days=1), 0, True),
    (TODAY + dt.timedelta(days=366), 366, False),
    (TODAY + dt.timedelta(days=367), 366, True),
    (dt.date(1, 1, 1), 366, True),
    (dt.date(9999, 12, 31), 3 * 366, True),
])
def test_day_refusal_bounds_the_window(day, ahead, refused) -> None:
    assert day < EARLIEST_DAY or day <= TODAY + dt.timedelta(days=ahead) or refused
    assert (day_refusal(day, ahead_days=ahead, today=TODAY) is not None) is refused


@pytest.mark.parametrize("query", [
    "on=0001-01-01", "on=9999-12-31", "period=month&on=9999-12-31",
    "period=custom&start=0001-01-01&end=0001-12-31",
    "period=custom&start=2026-01-01&end=9999-12-31",
])
def test_dashboard_refuses_dates_outside_the_window_without_a_500(client, login_as, query):
    login_as("owner")
    resp = client.get(f"/dashboard?{query}")
    assert resp.status_code in (200, 422), resp.status_code
    body = resp.get_data(as_text=True)
    assert "earliest date shopapp takes" in body or "too far ahead" in body


@pytest.mark.parametrize("query", ["date_to=9999-12-31", "date_from=0001-01-01",
                                   "date_from=1900-01-01&date_to=1900-12-31"])
def test_certificate_register_refuses_dates_outside_the_window(client, login_as, query):
    login_as("quality")
    resp = client.get(f"/certificates/?{query}")
    assert resp.status_code in (200, 422)
    body = resp.get_data(as_text=True)
    assert "earliest date shopapp takes" in body or "too far ahead" in body


def test_job_list_ignores_dates_outside_the_window_and_says_so(client, login_as):
    login_as("operator")
    resp = client.get("/jobs?received_to=9999-12-31&received_from=0001-01-01")
    assert resp.status_code == 200
    body = resp.get_data(as_text=True)
    assert "received_to" in body and "too far ahead" in body
    assert "received_from" in body and "earliest date shopapp takes" in body


def test_book_in_form_names_the_date_field(client, login_as, db, shop):
    login_as("operator")
    machine = shop.machine(min_speed_rpm=100.0)
    rtype = shop.rotor_type()
    db.commit()
    resp = client.post("/jobs/new", data={
        "customer_id": str(rtype.customer_id), "serial_number": "DW-1",
        "rotor_type_id": str(rtype.id), "machine_id": str(machine.id),
        "balancing_speed_rpm": "600", "tolerance_method": "grade", "tolerance_grade": "6.3",
        "received_on": "1900-01-01", "promised_on": "9999-12-31"})
    assert resp.status_code == 422
    body = resp.get_data(as_text=True)
    assert "1900-01-01 is before 1990-01-01" in body
    assert "9999-12-31 is too far ahead" in body


def test_cli_report_refuses_an_as_of_day_outside_the_window(runner):
    result = runner.invoke(args=["report", "shop", "--month", "2026-10", "--json",
                                 "--as-of", "9999-12-31"])
    assert result.exit_code != 0
    assert "9999-12-31 is too far ahead" in result.output
    result = runner.invoke(args=["report", "shop", "--month", "1900-01", "--json"])
    assert result.exit_code != 0
    assert "earliest date shopapp takes" in result.output


@pytest.mark.parametrize(("role", "url"), [
    ("operator", "/rotor-types/?customer_id=³"),
    ("operator", "/jobs?customer_id=³&machine_id=١٢"),
    ("operator", "/jobs/new?lookup-customer_id=²&lookup-serial_number=S"),
    ("owner", "/dashboard?operator_id=³"),
])
def test_unicode_digits_in_an_id_are_not_a_500(client, login_as, role, url) -> None:
    """Found by tests/web/test_fuzz.py: "³".isdigit() is True but int("³") raises
    (Python documentation, str.isdigit: superscripts are digits; int() takes decimals)."""
    assert "³".isdigit()
    with pytest.raises(ValueError):
        int("³")
    login_as(role)
    assert client.get(url).status_code < 500
