"""Admin pages: users (add, role, deactivate, password) and shop settings; admin only."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from shopapp.accounts import users
from shopapp.models import AuditEvent, ShopSettings, User

NEW_USER = {
    "username": "ines.k",
    "full_name": "Ines K",
    "role": "operator",
    "password": "long-enough-123",
    "password_again": "long-enough-123",
}
SETTINGS = {
    "shop_name": "Vale Balancing Works",
    "shop_address": "Unit 4, Mill Lane",
    "angle_sense": "against_rotation",
    "angle_zero_deg": "90",
    "unbalance_unit": "g·in",
    "job_number_pattern": "VB{yy}-{seq:04d}",
    "due_soon_days": "7",
}


def _counts(db: Session) -> tuple[int, int]:
    return (
        db.scalar(select(func.count()).select_from(User)) or 0,
        db.scalar(select(func.count()).select_from(AuditEvent)) or 0,
    )


@pytest.mark.parametrize("role", ["operator", "quality", "owner"])
def test_admin_pages_are_403_for_other_roles(client, login_as, make_user, db, role):
    other = make_user("operator")
    login_as(role)
    before = _counts(db)
    assert client.get("/admin/users").status_code == 403
    assert client.post("/admin/users", data=NEW_USER).status_code == 403
    assert client.post(f"/admin/users/{other.id}/role", data={"role": "admin"}).status_code == 403
    assert client.post(f"/admin/users/{other.id}/active", data={"active": "0"}).status_code == 403
    assert client.get(f"/admin/users/{other.id}/password").status_code == 403
    assert client.get("/admin/settings").status_code == 403
    assert client.post("/admin/settings", data=SETTINGS).status_code == 403
    assert client.get("/admin/settings/job-number-sample?pattern={seq}").status_code == 403
    assert _counts(db) == before
    db.refresh(other)
    assert other.role == "operator" and other.active


def test_admin_adds_a_user(client, login_as, db):
    login_as("admin")
    page = client.get("/admin/users")
    assert page.status_code == 200 and "Add a user" in page.get_data(as_text=True)
    assert client.post("/admin/users", data=NEW_USER).status_code == 302
    user = db.scalars(select(User).where(User.username == "ines.k")).one()
    assert user.role == "operator" and users.check_password(user, "long-enough-123")


@pytest.mark.parametrize(
    ("change", "message"),
    [
        ({"password_again": "something-else"}, "The two passwords differ"),
        ({"password": "short", "password_again": "short"}, "8 to 200 characters"),
        ({"username": "Bad Name!"}, "is not allowed"),
        ({"username": ""}, "Give a username"),
        ({"username": "u" * 65}, "64"),
        ({"role": "superuser"}, "Not one of the choices"),
        ({"full_name": "f" * 201}, "200"),
    ],
)
def test_bad_new_user_is_422_and_saves_nothing(client, login_as, db, change, message):
    login_as("admin")
    before = _counts(db)
    resp = client.post("/admin/users", data=NEW_USER | change)
    assert resp.status_code == 422
    assert message in resp.get_data(as_text=True)
    assert _counts(db) == before


def test_duplicate_username_is_422(client, login_as, make_user, db):
    make_user("operator", username="taken")
    login_as("admin")
    before = _counts(db)
    resp = client.post("/admin/users", data=NEW_USER | {"username": "taken"})
    assert resp.status_code == 422 and "already taken" in resp.get_data(as_text=True)
    assert _counts(db) == before


def test_change_role_and_refusals(client, login_as, make_user, db):
    op = make_user("operator")
    admin = login_as("admin")
    assert client.post(f"/admin/users/{op.id}/role", data={"role": "quality"}).status_code == 302
    db.refresh(op)
    assert op.role == "quality"
    resp = client.post(f"/admin/users/{op.id}/role", data={"role": "wizard"})
    assert resp.status_code == 422 and "Not one of the choices" in resp.get_data(as_text=True)
    resp = client.post(f"/admin/users/{admin.id}/role", data={"role": "owner"})
    assert resp.status_code == 422 and "your own role" in resp.get_data(as_text=True)
    db.refresh(admin)
    assert admin.role == "admin"


def test_deactivate_reactivate_and_not_self(client, login_as, make_user, db):
    op = make_user("operator")
    admin = login_as("admin")
    assert client.post(f"/admin/users/{op.id}/active", data={"active": "0"}).status_code == 302
    db.refresh(op)
    assert not op.active
    assert client.post(f"/admin/users/{op.id}/active", data={"active": "1"}).status_code == 302
    db.refresh(op)
    assert op.active
    resp = client.post(f"/admin/users/{admin.id}/active", data={"active": "0"})
    assert resp.status_code == 422 and "deactivate yourself" in resp.get_data(as_text=True)
    db.refresh(admin)
    assert admin.active


def test_deactivated_user_cannot_log_in(client, login_as, make_user, db):
    op = make_user("operator", username="leaver")
    login_as("admin")
    client.post(f"/admin/users/{op.id}/active", data={"active": "0"})
    client.post("/logout")
    client.refresh_csrf("/login")
    resp = client.post("/login", data={"username": "leaver", "password": "correct-horse-42"})
    assert resp.status_code != 302


def test_reset_password(client, login_as, make_user, db):
    op = make_user("operator")
    login_as("admin")
    assert client.get(f"/admin/users/{op.id}/password").status_code == 200
    resp = client.post(
        f"/admin/users/{op.id}/password",
        data={"password": "brand-new-pass-1", "password_again": "brand-new-pass-2"},
    )
    assert resp.status_code == 422 and "differ" in resp.get_data(as_text=True)
    resp = client.post(
        f"/admin/users/{op.id}/password",
        data={"password": "brand-new-pass-1", "password_again": "brand-new-pass-1"},
    )
    assert resp.status_code == 302
    db.refresh(op)
    assert users.check_password(op, "brand-new-pass-1")
    assert client.get("/admin/users/999999/password").status_code == 404


def test_settings_page_shows_defaults_and_sample_without_writing(client, login_as, db):
    login_as("admin")
    page = client.get("/admin/settings")
    assert page.status_code == 200
    text = page.get_data(as_text=True)
    assert "J{year}-{seq:05d}" in text and "J2026-00042" in text
    assert db.get(ShopSettings, 1) is None  # a GET writes nothing


def test_settings_page_script_is_a_static_file_the_csp_allows(client, login_as):
    # Before: an inline <script> the page's CSP (script-src 'self') blocked.
    login_as("admin")
    resp = client.get("/admin/settings")
    scripts = re.findall(r"<script\b[^>]*>", resp.get_data(as_text=True))
    assert scripts and all(" src=" in tag for tag in scripts)
    assert "unsafe-inline" not in resp.headers["Content-Security-Policy"].split("script-src")[-1]
    js = client.get("/static/settings.js")
    assert js.status_code == 200 and b"job_number_pattern" in js.data and b"sampleUrl" in js.data
    js.close()


def test_no_template_holds_an_inline_script() -> None:
    # The CSP refuses inline scripts, so one in a template is dead code on the page.
    inline = [str(p) for p in (Path(__file__).resolve().parents[2] / "shopapp").rglob("*.html")
              if re.search(r"<script\b(?![^>]*\bsrc=)[^>]*>", p.read_text(encoding="utf-8"))]
    assert inline == []


def test_settings_save(client, login_as, db):
    login_as("admin")
    assert client.post("/admin/settings", data=SETTINGS).status_code == 302
    row = db.get(ShopSettings, 1)
    assert row is not None
    db.refresh(row)
    assert (row.unbalance_unit, row.angle_sense, row.angle_zero_deg, row.due_soon_days) == (
        "g·in", "against_rotation", 90.0, 7
    )
    assert row.job_number_pattern == "VB{yy}-{seq:04d}"


@pytest.mark.parametrize(
    ("field", "value", "message"),
    [
        ("angle_zero_deg", "360", "up to (not including) 360"),
        ("angle_zero_deg", "-1", "up to (not including) 360"),
        ("angle_zero_deg", "nan", "finite number"),
        ("angle_zero_deg", "north", "Not a number"),
        ("angle_zero_deg", "", "Required"),
        ("unbalance_unit", "kg·m", "Not one of the choices"),
        ("angle_sense", "sideways", "Not one of the choices"),
        # The walk: "Angles are counted contains a control character" (a sentence's start
        # as the label); the message names the field.
        ("angle_sense", "\u202eagainst_rotation", "Angle direction contains a control character"),
        ("job_number_pattern", "J{year}", "{seq}"),
        ("job_number_pattern", "J{seq", "not a valid pattern"),
        ("job_number_pattern", "J{when}-{seq}", "{when}"),
        ("job_number_pattern", "J{seq:x}", "plain digits"),
        ("due_soon_days", "-1", "between 0 and 3650"),
        ("due_soon_days", "two", "whole number"),
        ("due_soon_days", "1" * 40, "at most 9 digits"),
        ("shop_name", "", "Give the shop"),
        ("shop_name", "s" * 201, "200"),
    ],
)
def test_bad_settings_are_422_and_nothing_saved(client, login_as, db, field, value, message):
    login_as("admin")
    before = _counts(db)
    resp = client.post("/admin/settings", data=SETTINGS | {field: value})
    assert resp.status_code == 422
    assert message in resp.get_data(as_text=True)
    assert db.get(ShopSettings, 1) is None
    assert _counts(db) == before


def test_job_number_sample_endpoint(client, login_as):
    login_as("admin")
    good = client.get("/admin/settings/job-number-sample?pattern=W{yy}-{seq:03d}").json
    assert good == {"sample": "W26-042", "error": None}
    bad = client.get("/admin/settings/job-number-sample?pattern=W{yy}").json
    assert bad["sample"] is None and "{seq}" in bad["error"]
