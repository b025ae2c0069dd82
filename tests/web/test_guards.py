"""Hostile input and safe defaults that hold for every route (shopapp.web.guards)."""

from __future__ import annotations

import html
from pathlib import Path

import pytest
from sqlalchemy import func, select

from shopapp import create_app
from shopapp.models import Customer


@pytest.mark.parametrize("url", ["/jobs/99999999999999999999", "/jobs/9223372036854775808",
                                 "/jobs/2147483648", "/jobs/0", "/customers/18446744073709551616",
                                 "/certificates/99999999999999999999/pdf"])
def test_ids_out_of_range_are_404(client, login_as, url: str) -> None:
    # Before: 500 from an integer overflow in the database driver (2^63 SQLite, 2^31 PG).
    login_as("quality")
    assert client.get(url).status_code == 404


def test_a_nul_in_the_login_form_is_refused_beside_the_field_not_a_crash(client) -> None:
    # Before: 500 on PostgreSQL, unauthenticated (psycopg refuses NUL in a string).
    resp = client.post("/login", data={"username": "ad\x00min", "password": "x"})
    assert resp.status_code == 422
    assert "Username contains a control character" in resp.get_data(as_text=True)


def test_a_control_character_in_a_form_field_is_refused_beside_it_and_nothing_saved(
        client, login_as, db) -> None:
    # Before: a whole-page 400 and what the user typed was lost.
    login_as("operator")
    resp = client.post("/customers/new", data={"name": "Invented\x01 Fans",
                                               "address": "1 Invented Road"})
    page = html.unescape(resp.get_data(as_text=True))
    assert resp.status_code == 422
    assert "Name contains a control character" in page
    assert "1 Invented Road" in page  # what was typed is drawn again
    assert db.scalar(select(func.count()).select_from(Customer)) == 0


def test_a_control_character_no_form_field_reads_still_writes_nothing(
        client, login_as, db) -> None:
    login_as("operator")
    resp = client.post("/customers/new", data={"name": "Invented Fans", "extra": "a\x00b"})
    assert resp.status_code == 400
    assert "'extra' contains a control character" in html.unescape(resp.get_data(as_text=True))
    assert db.scalar(select(func.count()).select_from(Customer)) == 0


def test_a_control_character_in_an_api_form_post_is_a_400_naming_the_field(client) -> None:
    resp = client.post("/api/v1/jobs", data={"notes": "a\x00b"}, csrf=False)
    assert resp.status_code == 400
    assert "'notes' contains a control character" in html.unescape(resp.get_data(as_text=True))


@pytest.mark.parametrize(("url", "field", "page", "character"), [
    ("/verify?q=a%00b", "q", "Verify", "U+0000, NUL"), ("/jobs/?q=%00", "q", "Jobs", "U+0000, NUL"),
    ("/customers/?q=x%01y", "q", "Customers", "U+0001, a control code"),
    ("/dashboard?period=year%01", "period", "Shop", "U+0001, a control code"),
    ("/jobs/?state=on_machine&q=a%7fb", "q", "Jobs", "U+007F, a control code"),
    # Before: a right-to-left override was called "a control character (such as NUL)".
    ("/verify?n=%E2%80%AEBC", "n", "Verify", "U+202E, a text-direction control"),
    ("/jobs/?q=a%E2%81%A6b", "q", "Jobs", "U+2066, a text-direction control")])
def test_a_control_character_in_a_query_draws_the_page_naming_the_field(
        client, login_as, url: str, field: str, page: str, character: str) -> None:
    # Before: a whole-page 400 (the list or dashboard was lost for a stray character).
    login_as("quality")
    resp = client.get(url)
    body = html.unescape(resp.get_data(as_text=True))
    assert resp.status_code == 422
    assert body.count("contains a control character") == 1
    assert (f"The field '{field}' contains a control character ({character}), so it was left "
            "out of this page") in body
    assert "such as NUL" not in body
    assert "<main>" in body and page in body  # the page itself, not the error page


@pytest.mark.parametrize("url", ["/dashboard.csv?table=headline%00", "/api/v1/jobs?q=%00"])
def test_a_control_character_in_a_download_or_api_query_is_still_a_400(
        client, login_as, url: str) -> None:
    # A file cannot show the message: answering it without the field would answer
    # another question than the one asked.
    login_as("quality")
    resp = client.get(url)
    assert resp.status_code == 400
    assert "'" + url.split("?")[1].split("=")[0] + "' contains a control character" in \
        html.unescape(resp.get_data(as_text=True))


def test_a_download_refusal_names_a_direction_override_as_such(client, login_as) -> None:
    login_as("owner")
    resp = client.get("/dashboard.csv?table=headline%E2%80%AE")
    body = html.unescape(resp.get_data(as_text=True))
    assert resp.status_code == 400
    assert "'table' contains a control character (U+202E, a text-direction control)" in body


@pytest.mark.parametrize(("typed", "named"), [
    ("12\x005", "U+0000, NUL"),
    ("\u202e12", "U+202E, a text-direction control"),
    ("1\x072", "U+0007, a control code"),
])
def test_a_control_character_in_a_number_field_gives_one_message(app, typed, named) -> None:
    # Before: "Not a number" and "contains a control character" for the same field; and
    # (the walk) the field's message said "such as NUL or a text-direction override"
    # whatever was found, while the request guard's named the character.
    from shopapp.core.forms import NumberField, ShopForm

    class MassForm(ShopForm):
        class Meta:
            csrf = False

        mass_g = NumberField("Mass (g)")

    with app.test_request_context(method="POST", data={"mass_g": typed}):
        form = MassForm()
        assert not form.validate()
        assert form.mass_g.errors == [f"Mass (g) contains a control character ({named}); "
                                      "type plain text and try again."]


def test_newlines_and_tabs_in_form_text_are_allowed(client, login_as) -> None:
    login_as("operator")
    resp = client.post("/customers/new", data={"name": "Invented Fans", "address": "1 Road\r\n\tX"})
    assert resp.status_code in (200, 302)


def test_session_cookie_is_samesite_lax_and_pages_are_not_cached(client, login_as) -> None:
    # Before: Flask's default config holds SESSION_COOKIE_SAMESITE=None, so the app's
    # setdefault("…", "Lax") never applied and the cookie went out without SameSite.
    cookie = client.get("/login").headers.get("Set-Cookie", "")
    assert cookie.startswith("session=") and "SameSite=Lax" in cookie and "HttpOnly" in cookie
    login_as("operator")
    resp = client.get("/")
    assert resp.headers["Cache-Control"] == "no-store"


def test_https_base_url_makes_cookies_secure_and_sends_hsts(tmp_path: Path) -> None:
    app = create_app({"TESTING": True, "SECRET_KEY": "k", "INSTANCE_PATH": str(tmp_path),
                      "DATABASE_URL": f"sqlite:///{tmp_path}/a.db",
                      "BASE_URL": "https://balancing.example.test"})
    assert app.config["SESSION_COOKIE_SECURE"] is True
    assert app.config["SESSION_COOKIE_SAMESITE"] == "Lax"
    resp = app.test_client().get("/healthz")
    assert resp.headers["Strict-Transport-Security"].startswith("max-age=")
