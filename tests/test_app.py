"""App factory, configuration precedence, secret-key refusal, /healthz, headers, login, CSRF."""

from __future__ import annotations

from pathlib import Path

import pytest

from shopapp import create_app
from shopapp.core import schema
from shopapp.core.config import ConfigError, load_config


def test_config_precedence_defaults_toml_env_overrides(tmp_path: Path) -> None:
    (tmp_path / "shopapp.toml").write_text('page_size = 40\nlog_level = "DEBUG"\nsql_echo = true\n')
    env = {"SHOPAPP_PAGE_SIZE": "60", "SHOPAPP_SQL_ECHO": "false", "OTHER": "x"}
    cfg = load_config({"PAGE_SIZE": 80}, instance_path=tmp_path, environ=env)
    assert cfg["PAGE_SIZE"] == 80  # the caller's dict beats everything
    assert cfg["SQL_ECHO"] is False  # environment beats the toml file
    assert cfg["LOG_LEVEL"] == "DEBUG"  # toml beats the defaults
    assert cfg["SESSION_LIFETIME_MINUTES"] == 480  # untouched default
    assert "OTHER" not in cfg
    assert cfg["DATABASE_URL"] == f"sqlite:///{tmp_path / 'shopapp.sqlite3'}"


def test_env_database_url_is_honoured(tmp_path: Path) -> None:
    env = {"SHOPAPP_DATABASE_URL": "postgresql://shop@localhost/shop"}
    assert load_config(instance_path=tmp_path, environ=env)["DATABASE_URL"].startswith("postgresql")


def test_broken_toml_is_a_clear_error(tmp_path: Path) -> None:
    (tmp_path / "shopapp.toml").write_text("page_size = = 3\n")
    with pytest.raises(ConfigError, match=r"shopapp\.toml: not valid TOML"):
        load_config(instance_path=tmp_path, environ={})


def test_production_start_without_secret_key_is_refused(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.delenv("SHOPAPP_SECRET_KEY", raising=False)
    with pytest.raises(ConfigError, match="SECRET_KEY is not set"):
        create_app({"INSTANCE_PATH": str(tmp_path), "DATABASE_URL": f"sqlite:///{tmp_path}/a.db"})


def test_the_callers_instance_folder_is_the_one_read(tmp_path: Path, monkeypatch) -> None:
    # Before: create_app({"INSTANCE_PATH": ...}) read ./instance/shopapp.toml, so after
    # scripts/serve had written a secret key there, a start without a key was not refused.
    checkout = tmp_path / "checkout"
    (checkout / "instance").mkdir(parents=True)
    (checkout / "instance" / "shopapp.toml").write_text('secret_key = "from-the-checkout"\n')
    monkeypatch.chdir(checkout)
    monkeypatch.delenv("SHOPAPP_SECRET_KEY", raising=False)
    monkeypatch.delenv("SHOPAPP_INSTANCE_PATH", raising=False)
    mine = tmp_path / "mine"
    mine.mkdir()
    with pytest.raises(ConfigError, match="SECRET_KEY is not set"):
        create_app({"INSTANCE_PATH": str(mine), "DATABASE_URL": f"sqlite:///{mine}/a.db"})
    (mine / "shopapp.toml").write_text('secret_key = "mine"\npage_size = 33\n')
    app = create_app({"INSTANCE_PATH": str(mine), "DATABASE_URL": f"sqlite:///{mine}/a.db"})
    assert app.config["SECRET_KEY"] == "mine" and app.config["PAGE_SIZE"] == 33
    assert Path(app.instance_path) == mine.resolve()


def test_a_numeric_secret_key_stays_a_string(tmp_path: Path) -> None:
    # Before: SHOPAPP_SECRET_KEY=12345 became the int 12345 and every page with a session
    # answered 500. Environment values take their key's type; a secret is always text.
    cfg = load_config(instance_path=tmp_path, environ={"SHOPAPP_SECRET_KEY": "12345",
                                                       "SHOPAPP_PAGE_SIZE": "40"})
    assert cfg["SECRET_KEY"] == "12345" and cfg["PAGE_SIZE"] == 40
    (tmp_path / "shopapp.toml").write_text("secret_key = 987654\n")
    assert load_config(instance_path=tmp_path, environ={})["SECRET_KEY"] == "987654"
    with pytest.raises(ConfigError, match="SHOPAPP_PAGE_SIZE"):
        load_config(instance_path=tmp_path, environ={"SHOPAPP_PAGE_SIZE": "many"})


def test_a_numeric_secret_key_serves_pages(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.setenv("SHOPAPP_SECRET_KEY", "12345")
    url = f"sqlite:///{tmp_path}/a.db"
    schema.upgrade(url)
    app = create_app({"INSTANCE_PATH": str(tmp_path), "DATABASE_URL": url})
    resp = app.test_client().get("/login")
    assert resp.status_code == 200 and "session" in resp.headers.get("Set-Cookie", "")


def test_testing_start_without_secret_key_is_allowed(tmp_path: Path) -> None:
    app = create_app(
        {"TESTING": True, "INSTANCE_PATH": str(tmp_path), "DATABASE_URL": f"sqlite:///{tmp_path}/a.db"}
    )
    assert app.testing


def test_healthz_is_503_before_migrations_and_200_after(fresh_database_url: str, tmp_path: Path):
    app = create_app(
        {"TESTING": True, "SECRET_KEY": "x", "DATABASE_URL": fresh_database_url,
         "INSTANCE_PATH": str(tmp_path)}
    )
    client = app.test_client()
    before = client.get("/healthz")
    assert before.status_code == 503
    assert before.json["schema_current"] is False
    schema.upgrade(fresh_database_url)
    after = client.get("/healthz")
    assert after.status_code == 200
    body = after.json
    assert body["schema_current"] is True
    assert body["database"] in {"sqlite", "postgresql"}
    assert body["version"]
    assert body["schema_revision"] == schema.head_revision(fresh_database_url)
    app.extensions["shopapp.db"].dispose()


def test_pages_need_login(client) -> None:
    resp = client.get("/")
    assert resp.status_code == 302
    assert "/login" in resp.headers["Location"]


def test_safe_headers_on_every_response(client) -> None:
    resp = client.get("/login")
    assert resp.headers["X-Content-Type-Options"] == "nosniff"
    assert resp.headers["X-Frame-Options"] == "DENY"
    assert "frame-ancestors 'none'" in resp.headers["Content-Security-Policy"]


def test_login_with_good_password_then_logout(client, make_user) -> None:
    from tests.conftest import PASSWORD

    user = make_user("quality")
    client.refresh_csrf("/login")
    resp = client.post("/login", data={"username": user.username, "password": PASSWORD})
    assert resp.status_code == 302
    home = client.get("/")
    assert user.full_name in home.get_data(as_text=True)
    client.refresh_csrf("/")
    out = client.post("/logout")
    assert out.status_code == 302
    assert client.get("/").status_code == 302


def test_login_with_wrong_password_says_so(client, make_user) -> None:
    user = make_user("operator")
    client.refresh_csrf("/login")
    resp = client.post("/login", data={"username": user.username, "password": "wrong-password"})
    assert resp.status_code == 422
    assert "Unknown username or wrong password" in resp.get_data(as_text=True)


def test_login_post_without_csrf_token_is_refused(client, make_user) -> None:
    from tests.conftest import PASSWORD

    user = make_user("operator")
    resp = client.post("/login", data={"username": user.username, "password": PASSWORD}, csrf=False)
    assert resp.status_code == 400
    assert "CSRF" in resp.get_data(as_text=True)
    assert client.get("/").status_code == 302  # still logged out


@pytest.mark.parametrize(
    "target, expected",
    [
        ("/customers", "/customers"),
        ("https://elsewhere.invalid/x", "/"),
        ("//elsewhere.invalid/x", "/"),
        ("/\\elsewhere.invalid", "/"),
    ],
)
def test_next_redirects_only_inside_the_app(client, make_user, target, expected) -> None:
    from tests.conftest import PASSWORD

    user = make_user("operator")
    client.refresh_csrf("/login")
    resp = client.post(
        f"/login?next={target}", data={"username": user.username, "password": PASSWORD}
    )
    assert resp.status_code == 302
    assert resp.headers["Location"] == expected


def test_inactive_user_cannot_log_in(client, make_user, db) -> None:
    from tests.conftest import PASSWORD

    user = make_user("operator")
    user.active = False
    db.commit()
    client.refresh_csrf("/login")
    resp = client.post("/login", data={"username": user.username, "password": PASSWORD})
    assert resp.status_code == 422


def test_unknown_page_is_a_plain_404(client) -> None:
    resp = client.get("/no-such-page")
    assert resp.status_code == 404
    assert "Traceback" not in resp.get_data(as_text=True)


def test_every_page_names_an_icon_that_is_served(client) -> None:  # type: ignore[no-untyped-def]
    # A browser walk saw a 404 for /favicon.ico on every first page.
    import re

    page = client.get("/login").get_data(as_text=True)
    href = re.search(r'<link rel="icon"[^>]*href="([^"]+)"', page)
    assert href is not None
    icon = client.get(href.group(1))
    assert icon.status_code == 200 and icon.mimetype == "image/svg+xml"
    assert icon.get_data().startswith(b"<svg")
    icon.close()  # a static file is streamed: close it, as a server would
