"""Sessions end on log-out, on an admin's password reset and (other sessions) on the
user's own password change. Flask's session is a signed cookie the browser keeps; a copy
of it (another tab's, a stolen one) would stay valid until it expires unless the server
checks something it controls. Common practice, no source: "log out everywhere after a
password change" (value from memory: the OWASP Session Management Cheat Sheet asks for
session invalidation on log-out and on password change)."""

from __future__ import annotations

from flask import Flask

from shopapp.accounts import users
from tests.conftest import PASSWORD, ShopClient


def _second_client(app: Flask, username: str) -> ShopClient:
    other: ShopClient = app.test_client()  # type: ignore[assignment]
    other.refresh_csrf("/login")
    assert other.post("/login", data={"username": username,
                                      "password": PASSWORD}).status_code == 302
    other.refresh_csrf("/")
    return other


def _copy_cookie(app: Flask, source: ShopClient) -> ShopClient:
    """A client holding a copy of ``source``'s session cookie."""
    thief: ShopClient = app.test_client()  # type: ignore[assignment]
    cookie = source.get_cookie("session")
    assert cookie is not None
    thief.set_cookie("session", cookie.value)
    return thief


def test_a_copied_cookie_dies_with_the_log_out(app, client, login_as):
    login_as("operator")
    thief = _copy_cookie(app, client)
    assert thief.get("/").status_code == 200  # the copy works while the session lives
    assert client.post("/logout").status_code == 302
    resp = thief.get("/")
    assert resp.status_code == 302 and "/login" in resp.headers["Location"]
    page = thief.get("/login").get_data(as_text=True)
    assert "Your session has ended" in page


def test_an_admin_password_reset_ends_the_users_sessions(app, client, login_as, make_user):
    op = make_user("operator")
    op_client = _second_client(app, op.username)
    assert op_client.get("/").status_code == 200
    login_as("admin")
    resp = client.post(f"/admin/users/{op.id}/password",
                       data={"password": "fresh-turbine-77", "password_again": "fresh-turbine-77"})
    assert resp.status_code == 302
    assert op_client.get("/").status_code == 302
    assert client.get("/").status_code == 200  # the admin's own session is untouched


def test_own_password_change_ends_other_sessions_and_keeps_this_one(app, client, login_as, db):
    me = login_as("quality")
    elsewhere = _second_client(app, me.username)
    resp = client.post("/account/password", data={
        "current_password": PASSWORD, "password": "spindle-night-31",
        "password_again": "spindle-night-31"})
    assert resp.status_code == 302, resp.get_data(as_text=True)[:300]
    assert client.get("/").status_code == 200
    assert elsewhere.get("/").status_code == 302
    db.expire_all()
    assert users.check_password(users.get_user(db, me.id), "spindle-night-31")


def test_own_password_change_needs_the_current_password(client, login_as, db):
    me = login_as("operator")
    resp = client.post("/account/password", data={
        "current_password": "not-my-password", "password": "spindle-night-31",
        "password_again": "spindle-night-31"})
    assert resp.status_code == 422
    assert "is not your current password" in resp.get_data(as_text=True)
    db.expire_all()
    assert users.check_password(users.get_user(db, me.id), PASSWORD)


def test_own_password_change_follows_the_password_rules(client, login_as):
    me = login_as("operator")
    resp = client.post("/account/password", data={
        "current_password": PASSWORD, "password": me.username + "2026",
        "password_again": me.username + "2026"})
    assert resp.status_code == 422
    assert "must not be the username" in resp.get_data(as_text=True)


def test_log_out_is_audited(client, login_as, db):
    from sqlalchemy import select

    from shopapp.models import AuditEvent

    me = login_as("owner")
    client.post("/logout")
    event = db.scalars(select(AuditEvent).where(AuditEvent.action == "logout")).one()
    assert event.user_id == me.id and event.after["username"] == me.username


def test_a_session_from_before_the_version_check_is_logged_out(app, client, login_as):
    """A cookie without the version (older than this check) is not trusted."""
    login_as("operator")
    with client.session_transaction() as sess:
        sess.pop("session_version")
    assert client.get("/").status_code == 302


def test_the_login_page_says_how_long_a_session_lasts_without_use(app, client) -> None:
    # The walk: after an idle session ended, the page only said "Please log in".
    minutes = int(app.config["PERMANENT_SESSION_LIFETIME"].total_seconds() // 60)
    page = client.get("/jobs", follow_redirects=True).get_data(as_text=True)
    assert f"A session ends after {minutes} minutes without use." in page


def test_a_one_minute_session_is_said_in_the_singular(tmp_path) -> None:
    # The walk (SHOPAPP_SESSION_LIFETIME_MINUTES=1): "A session ends after 1 minutes".
    from shopapp import create_app

    app = create_app({"INSTANCE_PATH": str(tmp_path), "SECRET_KEY": "test-only-secret",
                      "DATABASE_URL": f"sqlite:///{tmp_path}/a.db",
                      "SESSION_LIFETIME_MINUTES": 1})
    message = app.login_manager.login_message  # type: ignore[attr-defined]
    assert "A session ends after 1 minute without use." in message


def test_a_form_sent_after_the_session_ended_says_so_and_saves_nothing(
        app, client, login_as, db, shop) -> None:
    # The walk: a run typed, the session ran out, "Log run" answered "Form expired or
    # forged: The CSRF session token is missing" - nothing about the session or the run.
    import html

    from sqlalchemy import func, select

    from shopapp.models import Run

    login_as("operator")
    job = shop.job()
    db.commit()
    with client.session_transaction() as sess:
        sess.clear()  # what the browser sends once the session cookie has expired
    resp = client.post(f"/jobs/{job.id}/runs", data={
        "run-purpose": "initial", "run-speed_rpm": "1000", "run-unit": "g·mm",
        "run-amplitude_1": "10", "run-angle_1_deg": "10"})
    page = html.unescape(resp.get_data(as_text=True))
    minutes = int(app.config["PERMANENT_SESSION_LIFETIME"].total_seconds() // 60)
    assert resp.status_code == 400
    assert "Your session had ended" in page and "was not saved" in page
    assert f"A session ends after {minutes} minutes without use" in page
    assert "CSRF" not in page
    assert 'href="/login?next=' in page
    assert db.scalar(select(func.count()).select_from(Run).where(Run.job_id == job.id)) == 0


def test_a_forged_form_in_a_live_session_is_still_refused_as_such(client, login_as, shop,
                                                                   db) -> None:
    login_as("operator")
    job = shop.job()
    db.commit()
    resp = client.post(f"/jobs/{job.id}/runs", data={"csrf_token": "not-the-token",
                                                     "run-purpose": "initial"})
    assert resp.status_code == 400
    assert "Form expired or forged" in resp.get_data(as_text=True)


def _ninety_minutes_later(monkeypatch) -> None:
    """Signed tokens and cookies are read as if an hour and a half had passed (lunch)."""
    import itsdangerous.timed

    real = itsdangerous.timed.TimestampSigner.get_timestamp
    monkeypatch.setattr(itsdangerous.timed.TimestampSigner, "get_timestamp",
                        lambda self: real(self) + 90 * 60)


def test_a_form_left_open_over_lunch_is_saved_while_the_session_lives(
        app, client, login_as, db, shop, monkeypatch) -> None:
    # A session lasts 8 hours without use (config default); a form's anti-forgery token
    # expired after one hour on its own (Flask-WTF's default), so a run typed before lunch
    # and sent after it was refused as "expired or forged" and lost. The token now lives
    # as long as the session it belongs to.
    from sqlalchemy import func, select

    from shopapp.models import Run

    assert app.config["PERMANENT_SESSION_LIFETIME"].total_seconds() > 90 * 60
    login_as("operator")
    job = shop.job()
    db.commit()
    client.refresh_csrf(f"/jobs/{job.id}")
    _ninety_minutes_later(monkeypatch)
    resp = client.post(f"/jobs/{job.id}/runs", data={
        "run-purpose": "initial", "run-speed_rpm": "1000", "run-unit": "g·mm",
        "run-amplitude_1": "10", "run-angle_1_deg": "10",
        "run-amplitude_2": "12", "run-angle_2_deg": "20"})
    assert resp.status_code in (302, 303), resp.get_data(as_text=True)[:500]
    assert db.scalar(select(func.count()).select_from(Run).where(Run.job_id == job.id)) == 1


def test_a_login_page_left_open_over_lunch_still_logs_in(app, client, make_user,
                                                         monkeypatch) -> None:
    user = make_user("operator")
    client.refresh_csrf("/login")
    _ninety_minutes_later(monkeypatch)
    resp = client.post("/login", data={"username": user.username, "password": PASSWORD})
    assert resp.status_code == 302, resp.get_data(as_text=True)[:500]
    assert client.get("/").status_code == 200
