"""API tokens: shown once, stored as SHA-256, working only while live and the user active;
made and revoked on the page and with ``shopapp token``; last use kept once a minute."""

from __future__ import annotations

import datetime as dt
import hashlib
import re

from sqlalchemy import func, select

from shopapp.accounts import api_tokens
from shopapp.accounts.users import set_active
from shopapp.models import ApiToken, AuditEvent, Customer


def test_token_is_stored_only_as_its_sha256(db, make_user, make_token) -> None:
    user = make_user("operator")
    secret = make_token(user)
    row = db.scalars(select(ApiToken).where(ApiToken.user_id == user.id)).one()
    # hashlib is the reference: the stored digest is SHA-256 of the secret, not the secret.
    assert row.secret_sha256 == hashlib.sha256(secret.encode()).hexdigest()
    assert secret not in (row.secret_sha256, row.prefix, row.name)
    # 32 random bytes → 43 base64url characters after the prefix (RFC 4648, no padding).
    assert re.fullmatch(r"shp_[A-Za-z0-9_-]{43}", secret)


def test_bearer_token_reads_and_a_wrong_one_is_401_json(api_as, shop) -> None:
    api = api_as("owner")
    shop.customer(name="Orchard Pumps")
    shop.db.commit()
    ok = api.get("/customers")
    assert ok.status_code == 200
    assert [c["name"] for c in ok.get_json()["items"]] == ["Orchard Pumps"]
    api.secret = api.secret[:-2] + ("AA" if not api.secret.endswith("AA") else "BB")
    bad = api.get("/customers")
    assert bad.status_code == 401
    assert bad.get_json()["error"]["code"] == "unauthorized"
    assert bad.headers["WWW-Authenticate"] == "Bearer"


def test_revoked_token_and_inactive_user_stop_working(api_as, db, make_user) -> None:
    api = api_as("operator")
    assert api.get("/jobs").status_code == 200
    token = db.scalars(select(ApiToken).where(ApiToken.user_id == api.user.id)).one()
    api_tokens.revoke_token(db, token, by=api.user)
    db.commit()
    assert api.get("/jobs").status_code == 401

    other = api_as("quality")
    admin = make_user("admin")
    assert other.get("/jobs").status_code == 200
    set_active(db, other.user, by=admin, active=False)
    db.commit()
    assert other.get("/jobs").status_code == 401


def test_session_cookie_is_not_a_login_for_the_api(client, login_as) -> None:
    login_as("operator")
    assert client.get("/jobs").status_code == 200  # the page session works for pages
    resp = client.get("/api/v1/jobs")
    assert resp.status_code == 401
    assert resp.is_json
    assert "Set-Cookie" not in resp.headers


def test_api_answers_set_no_cookie(api_as) -> None:
    api = api_as("operator")
    for resp in (api.get("/jobs"), api.post("/customers", json={"name": "Kiln Road Fans"}),
                 api.post("/customers", json={})):
        assert resp.status_code in (200, 201, 422)
        assert "Set-Cookie" not in resp.headers


def test_api_writes_need_no_csrf_token_but_a_bearer_token(api_as) -> None:
    api = api_as("operator")
    resp = api.post("/customers", json={"name": "Brookside Fans"})
    assert resp.status_code == 201, resp.get_json()
    api.secret = None
    assert api.post("/customers", json={"name": "Brookside Fans 2"}).status_code == 401


def test_last_used_is_written_at_most_once_a_minute(db, make_user, make_token) -> None:
    user = make_user("operator")
    secret = make_token(user)
    t0 = dt.datetime(2026, 11, 3, 8, 0, tzinfo=dt.UTC)
    first = api_tokens.check_secret(db, secret, now=t0)
    assert first is not None and first.stale  # never used yet
    api_tokens.touch(db, first.token_id, now=t0)
    # 59 s later the record is fresh enough: no write is asked for, and none happens.
    later = api_tokens.check_secret(db, secret, now=t0 + dt.timedelta(seconds=59))
    assert later is not None and not later.stale
    api_tokens.touch(db, first.token_id, now=t0 + dt.timedelta(seconds=59))
    db.expire_all()
    assert db.get(ApiToken, first.token_id).last_used_at == t0
    api_tokens.touch(db, first.token_id, now=t0 + dt.timedelta(seconds=61))
    db.expire_all()
    assert db.get(ApiToken, first.token_id).last_used_at == t0 + dt.timedelta(seconds=61)


def test_a_request_records_last_used(api_as, db) -> None:
    api = api_as("owner")
    assert api.get("/jobs").status_code == 200
    row = db.scalars(select(ApiToken).where(ApiToken.user_id == api.user.id)).one()
    db.refresh(row)
    assert row.last_used_at is not None


def test_page_shows_the_secret_once_and_revokes(client, login_as, db) -> None:
    user = login_as("owner")
    resp = client.post("/account/api-tokens", data={"name": "monthly figures"})
    assert resp.status_code == 201
    secret = re.search(r'class="token-secret">([^<]+)<', resp.get_data(as_text=True)).group(1)
    row = db.scalars(select(ApiToken).where(ApiToken.user_id == user.id)).one()
    assert row.secret_sha256 == hashlib.sha256(secret.encode()).hexdigest()
    listing = client.get("/account/api-tokens").get_data(as_text=True)
    assert secret not in listing and row.prefix in listing
    done = client.post(f"/api-tokens/{row.id}/revoke")
    assert done.status_code == 302
    db.refresh(row)
    assert row.revoked_at is not None
    assert db.scalar(select(func.count()).select_from(AuditEvent).where(
        AuditEvent.entity == "api_token")) == 2


def test_someone_elses_token_cannot_be_revoked_but_an_admin_can(client, login_as, db,
                                                                make_user, make_token) -> None:
    victim = make_user("quality")
    make_token(victim)
    row = db.scalars(select(ApiToken).where(ApiToken.user_id == victim.id)).one()
    login_as("operator")
    assert client.post(f"/api-tokens/{row.id}/revoke").status_code == 403
    db.refresh(row)
    assert row.revoked_at is None
    client.post("/logout")
    login_as("admin")
    assert client.get(f"/admin/users/{victim.id}/api-tokens").status_code == 200
    assert client.post(f"/api-tokens/{row.id}/revoke").status_code == 302
    db.refresh(row)
    assert row.revoked_at is not None


def test_cli_token_add_list_revoke(runner, db, make_user, app) -> None:
    user = make_user("operator", username="otto.cli")
    added = runner.invoke(args=["token", "add", "otto.cli", "--name", "bench scale"])
    assert added.exit_code == 0, added.output
    secret = added.output.strip().splitlines()[-1]
    row = db.scalars(select(ApiToken).where(ApiToken.user_id == user.id)).one()
    assert row.secret_sha256 == hashlib.sha256(secret.encode()).hexdigest()
    listed = runner.invoke(args=["token", "list", "otto.cli"])
    assert "bench scale" in listed.output and secret not in listed.output
    gone = runner.invoke(args=["token", "revoke", str(row.id)])
    assert gone.exit_code == 0, gone.output
    db.refresh(row)
    assert row.revoked_at is not None
    again = runner.invoke(args=["token", "revoke", str(row.id)])
    assert again.exit_code != 0 and "already revoked" in again.output
    unknown = runner.invoke(args=["token", "add", "nobody", "--name", "x"])
    assert unknown.exit_code != 0 and "no user called" in unknown.output
    assert db.scalar(select(func.count()).select_from(Customer)) == 0
