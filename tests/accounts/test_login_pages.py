"""The log-in page under the throttle, across two server processes, and the admin's
page of failed log-ins. Common practice, no source: HTTP 429 "Too Many Requests" with
a Retry-After header in seconds is how a server says "slow down" (RFC 6585 §4 defines
429; RFC 9110 §10.2.3 defines Retry-After)."""

from __future__ import annotations

import re
from collections.abc import Iterator
from pathlib import Path

import pytest
from flask import Flask
from sqlalchemy import select
from werkzeug.security import generate_password_hash

from shopapp import create_app
from shopapp.accounts import users
from shopapp.core.database import make_engine
from shopapp.models import AuditEvent, Base
from tests import factories
from tests.conftest import PASSWORD, ShopClient

CHEAP = "pbkdf2:sha256:1000"


@pytest.fixture(autouse=True)
def _quick_dummy_hash(monkeypatch):  # type: ignore[no-untyped-def]
    monkeypatch.setattr(users, "_DUMMY_HASH", generate_password_hash("x", method=CHEAP))


def _post_login(client: ShopClient, username: str, password: str, addr: str = "10.0.0.5"):  # type: ignore[no-untyped-def]
    client.refresh_csrf("/login")
    return client.post("/login", data={"username": username, "password": password},
                        environ_base={"REMOTE_ADDR": addr})


def test_fifth_failure_pauses_the_username_with_429_and_retry_after(client, make_user, db):
    user = make_user("operator", username="pia.test")
    user.password_hash = generate_password_hash(PASSWORD, method=CHEAP)
    db.commit()
    statuses = [_post_login(client, "pia.test", f"wrong-{i}").status_code for i in range(5)]
    assert statuses == [422, 422, 422, 422, 429]
    right = _post_login(client, "pia.test", PASSWORD)
    assert right.status_code == 429
    assert 1 <= int(right.headers["Retry-After"]) <= 60
    text = right.get_data(as_text=True)
    assert "Too many failed log-ins for this username or from this computer" in text
    assert client.get("/").status_code == 302  # still not logged in


def test_a_paused_unknown_username_answers_like_a_real_one(client, make_user, db):
    user = make_user("operator", username="pia.test")
    user.password_hash = generate_password_hash(PASSWORD, method=CHEAP)
    db.commit()
    real = [_post_login(client, "pia.test", "wrong-pw-1", addr=f"10.1.0.{i}") for i in range(6)]
    ghost = [_post_login(client, "nobody.x", "wrong-pw-1", addr=f"10.2.0.{i}") for i in range(6)]
    assert [r.status_code for r in real] == [r.status_code for r in ghost]
    token = re.compile(r'value="[^"]*"')  # the CSRF token and the username typed differ

    def page(resp) -> str:  # type: ignore[no-untyped-def]
        return token.sub("", resp.get_data(as_text=True))

    assert page(real[-1]) == page(ghost[-1])


@pytest.fixture()
def two_processes(fresh_database_url: str, tmp_path: Path) -> Iterator[tuple[Flask, Flask]]:
    """Two applications on one database: what two server processes share."""
    eng = make_engine(fresh_database_url)
    Base.metadata.create_all(eng)
    eng.dispose()
    apps = []
    for n in (1, 2):
        app = create_app({"TESTING": True, "SECRET_KEY": "test-only-secret",
                          "DATABASE_URL": fresh_database_url,
                          "INSTANCE_PATH": str(tmp_path / f"p{n}")})
        app.test_client_class = ShopClient
        apps.append(app)
    yield apps[0], apps[1]
    for app in apps:
        app.extensions["shopapp.db"].dispose()


def test_failures_in_two_server_processes_add_up(two_processes):
    one, two = two_processes
    with one.extensions["shopapp.db"].session() as db:
        user = factories.user(db, username="pia.test", role="operator", password=PASSWORD)
        user.password_hash = generate_password_hash(PASSWORD, method=CHEAP)
    c1, c2 = one.test_client(), two.test_client()
    got = [_post_login(c, "pia.test", f"wrong-{i}").status_code
           for i, c in enumerate([c1, c2, c1, c2, c1])]
    assert got == [422, 422, 422, 422, 429]  # an in-memory counter would say 422 five times
    assert _post_login(c2, "pia.test", PASSWORD).status_code == 429


def test_admin_sees_recent_failures_paginated(client, login_as, make_user, db, count_queries):
    for i in range(30):
        _post_login(client, f"ghost{i:02d}", "wrong-pw-x", addr=f"10.5.{i}.1")
    login_as("admin")
    first = client.get("/admin/logins")
    assert first.status_code == 200
    text = first.get_data(as_text=True)
    assert "ghost29" in text and "ghost00" not in text  # newest first, 25 a page
    assert "unknown username" in text and "wrong-pw-x" not in text
    assert "page 1 of 2" in text
    second = client.get("/admin/logins?page=2")
    assert "ghost00" in second.get_data(as_text=True)
    with count_queries() as q:
        client.get("/admin/logins")
    with_30 = q.count
    for i in range(30, 60):
        _post_login(client, f"ghost{i:02d}", "wrong-pw-x", addr=f"10.6.{i}.1")
    with count_queries() as q:
        client.get("/admin/logins")
    assert q.count == with_30  # no query per row


@pytest.mark.parametrize("role", ["operator", "quality", "owner"])
def test_the_logins_page_is_admin_only(client, login_as, role):
    login_as(role)
    assert client.get("/admin/logins").status_code == 403
    assert client.post("/admin/logins/unlock",
                       data={"kind": "account", "subject": "x"}).status_code == 403


def test_admin_ends_a_pause_from_the_page(client, login_as, make_user, db):
    user = make_user("operator", username="pia.test")
    user.password_hash = generate_password_hash(PASSWORD, method=CHEAP)
    db.commit()
    for i in range(5):
        _post_login(client, "pia.test", f"wrong-{i}")
    login_as("admin")
    page = client.get("/admin/logins").get_data(as_text=True)
    assert "pia.test" in page and "end the pause" in page
    refused = client.post("/admin/logins/unlock", data={"kind": "account", "subject": "pia.test"},
                          csrf=False)
    assert refused.status_code == 400  # CSRF stays on
    done = client.post("/admin/logins/unlock", data={"kind": "account", "subject": "pia.test"})
    assert done.status_code == 302
    client.refresh_csrf("/")
    client.post("/logout")
    assert _post_login(client, "pia.test", PASSWORD).status_code == 302
    unlock = db.scalars(select(AuditEvent).where(AuditEvent.action == "unlock")).one()
    assert unlock.after == {"kind": "account", "subject": "pia.test"}


def _client_of_failure(app: Flask) -> str:
    client: ShopClient = app.test_client()  # type: ignore[assignment]
    client.refresh_csrf("/login")
    client.post("/login", data={"username": "ghost.proxy", "password": "wrong-pw-9"},
                headers={"X-Forwarded-For": "192.0.2.44"},
                environ_base={"REMOTE_ADDR": "10.0.0.1"})
    with app.extensions["shopapp.db"].session() as db:
        event = db.scalars(select(AuditEvent).where(AuditEvent.action == "login_failed")
                           .order_by(AuditEvent.id.desc())).first()
        assert event is not None
        return str(event.after["client"])


@pytest.mark.parametrize("proxies, client", [(0, "10.0.0.1"), (1, "192.0.2.44")])
def test_the_client_address_comes_from_a_proxy_only_when_trusted(two_processes, tmp_path,
                                                                 fresh_database_url, proxies,
                                                                 client):
    # Werkzeug's ProxyFix takes the last x_for entries of X-Forwarded-For (its docs).
    app = create_app({"TESTING": True, "SECRET_KEY": "test-only-secret",
                      "DATABASE_URL": fresh_database_url, "INSTANCE_PATH": str(tmp_path / "px"),
                      "TRUSTED_PROXIES": proxies})
    app.test_client_class = ShopClient
    try:
        assert _client_of_failure(app) == client
    finally:
        app.extensions["shopapp.db"].dispose()


def test_a_negative_proxy_count_stops_the_start(tmp_path):
    from shopapp.core.config import ConfigError

    with pytest.raises(ConfigError, match="TRUSTED_PROXIES must be a whole number from 0 to 5"):
        create_app({"TESTING": True, "SECRET_KEY": "x", "INSTANCE_PATH": str(tmp_path),
                    "TRUSTED_PROXIES": -1})


def test_the_password_is_checked_before_the_write_lock_is_taken(two_processes, monkeypatch,
                                                               backend):
    """SQLite has one write lock for the whole database; a log-in that held it through
    the (deliberately slow) password hash made every other save wait. While the hash is
    computed another connection must be able to take the write lock at once."""
    if backend != "sqlite":
        pytest.skip("PostgreSQL has row locks, no database-wide write lock")
    import sqlite3

    app, _other = two_processes
    path = app.config["DATABASE_URL"].removeprefix("sqlite:///")
    with app.extensions["shopapp.db"].session() as db:
        factories.user(db, username="pia.test", role="operator", password=PASSWORD)
    real = users.check_password
    seen: list[str] = []

    def probing_check(user, password):  # type: ignore[no-untyped-def]
        other = sqlite3.connect(path, timeout=0, isolation_level=None)
        try:
            other.execute("BEGIN IMMEDIATE")
            other.execute("ROLLBACK")
            seen.append("free")
        except sqlite3.OperationalError as exc:
            seen.append(str(exc))
        finally:
            other.close()
        return real(user, password)

    monkeypatch.setattr(users, "check_password", probing_check)
    client: ShopClient = app.test_client()  # type: ignore[assignment]
    assert _post_login(client, "pia.test", PASSWORD).status_code == 302
    assert _post_login(client.application.test_client(), "pia.test", "wrong-pw-1").status_code \
        == 422
    assert seen == ["free", "free"]
