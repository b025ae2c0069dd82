"""A password an administrator gave is for one log-in: the user chooses an own one first.

Common practice for shared initial credentials (OWASP Authentication Cheat Sheet: force a
change of any password set by someone else); no numeric source.
"""

from __future__ import annotations

from sqlalchemy import select

from shopapp.models import User

GIVEN = "given-by-admin-77"
OWN = "my-own-choice-91"
NEW_USER = {"username": "nell.r", "full_name": "Nell R", "role": "operator",
            "password": GIVEN, "password_again": GIVEN}


def _log_in(client, username: str, password: str):  # type: ignore[no-untyped-def]
    client.refresh_csrf("/")
    client.post("/logout")
    client.refresh_csrf("/login")
    return client.post("/login", data={"username": username, "password": password})


def test_a_user_added_on_the_admin_page_chooses_an_own_password_first(client, login_as,
                                                                      db) -> None:
    login_as("admin")
    assert client.post("/admin/users", data=NEW_USER).status_code == 302
    assert _log_in(client, "nell.r", GIVEN).status_code == 302
    # Every page leads to the password page, which says why and offers no way round it.
    for url in ("/", "/jobs", "/jobs/new", "/dashboard"):
        resp = client.get(url)
        assert resp.status_code == 302 and resp.headers["Location"].endswith(
            "/account/password"), url
    page = client.get("/account/password").get_data(as_text=True)
    assert 'id="own-password-first"' in page and ">Cancel<" not in page
    client.refresh_csrf("/account/password")
    done = client.post("/account/password", data={
        "current_password": GIVEN, "password": OWN, "password_again": OWN})
    assert done.status_code == 302
    assert client.get("/jobs").status_code == 200
    user = db.scalars(select(User).where(User.username == "nell.r")).one()
    db.refresh(user)
    assert not user.must_change_password


def test_a_reset_by_an_admin_asks_again_but_users_made_on_the_server_do_not(
        client, login_as, make_user, db) -> None:
    kept = make_user("operator")  # as `shopapp user add` / the first start make them
    assert not kept.must_change_password
    login_as("admin")
    client.refresh_csrf(f"/admin/users/{kept.id}/password")
    assert client.post(f"/admin/users/{kept.id}/password",
                       data={"password": GIVEN, "password_again": GIVEN}).status_code == 302
    assert _log_in(client, kept.username, GIVEN).status_code == 302
    assert client.get("/jobs").headers["Location"].endswith("/account/password")
    # Logging out stays open.
    client.refresh_csrf("/account/password")
    assert client.post("/logout").status_code == 302
    assert client.get("/jobs").headers["Location"].startswith("/login")


def test_existing_accounts_are_not_asked(client, login_as) -> None:
    login_as("operator")
    assert client.get("/jobs").status_code == 200
