"""Admin services: roles, deactivation, password reset, shop settings."""

from __future__ import annotations

import pytest
from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.accounts import users
from shopapp.core import settings
from shopapp.core.errors import PermissionDenied, ValidationFailed
from shopapp.models import AuditEvent, ShopSettings


def _actions(db: Session, entity: str, entity_id: int) -> list[str]:
    db.flush()
    stmt = (
        select(AuditEvent.action)
        .where(AuditEvent.entity == entity, AuditEvent.entity_id == entity_id)
        .order_by(AuditEvent.id)
    )
    return list(db.scalars(stmt))


def test_set_role_is_admin_only_and_audited(db: Session, make_user):
    admin, op = make_user("admin"), make_user("operator")
    with pytest.raises(PermissionDenied):
        users.set_role(db, op, by=make_user("quality"), role="quality")
    users.set_role(db, op, by=admin, role="quality")
    assert op.role == "quality"
    assert _actions(db, "user", op.id)[-1] == "set_role"
    with pytest.raises(ValidationFailed) as exc:
        users.set_role(db, op, by=admin, role="superuser")
    assert exc.value.field == "role"


def test_last_active_admin_keeps_the_role(db: Session, make_user):
    a1, a2 = make_user("admin"), make_user("admin")
    # Another admin may demote a1 while a2 remains...
    users.set_role(db, a1, by=a2, role="owner")
    # ...but a2, now the last active admin, cannot give the role away.
    with pytest.raises(ValidationFailed, match="own role"):
        users.set_role(db, a2, by=a2, role="operator")
    # The rule behind it also holds on its own (whoever asks).
    with pytest.raises(ValidationFailed, match="last active admin"):
        users._keeps_an_admin(db, a2, "role")
    assert a2.role == "admin"


def test_admin_cannot_deactivate_self(db: Session, make_user):
    admin = make_user("admin")
    with pytest.raises(ValidationFailed, match="yourself"):
        users.set_active(db, admin, by=admin, active=False)
    assert admin.active


def test_deactivate_and_reactivate(db: Session, make_user):
    admin, op = make_user("admin"), make_user("operator")
    users.set_active(db, op, by=admin, active=False)
    assert not op.active
    users.set_active(db, op, by=admin, active=True)
    assert op.active
    assert _actions(db, "user", op.id)[-2:] == ["deactivate", "activate"]


def test_deactivating_the_last_admin_by_another_role_is_refused(db: Session, make_user):
    admin = make_user("admin")
    with pytest.raises(PermissionDenied):
        users.set_active(db, admin, by=make_user("owner"), active=False)


def test_reset_password_checks_length_and_keeps_no_hash_in_audit(db: Session, make_user):
    admin, op = make_user("admin"), make_user("operator")
    with pytest.raises(ValidationFailed):
        users.reset_password(db, op, by=admin, password="short")
    users.reset_password(db, op, by=admin, password="a-new-long-password")
    assert users.check_password(op, "a-new-long-password")
    db.flush()
    stmt = select(AuditEvent).where(AuditEvent.action == "reset_password")
    event = db.scalars(stmt.order_by(AuditEvent.id.desc())).first()
    assert event is not None and "hash" not in str(event.after)


def test_create_user_by_a_non_admin_is_refused(db: Session, make_user):
    with pytest.raises(PermissionDenied):
        users.create_user(
            db, username="newbie", full_name="", role="operator", password="long-enough-pw",
            by=make_user("operator"),
        )


# --------------------------------------------------------------------------- settings


def test_update_settings_validates_everything_and_saves_nothing_on_error(db: Session, make_user):
    admin = make_user("admin")
    with pytest.raises(ValidationFailed) as exc:
        settings.update_settings(
            db, by=admin, shop_name="Vale Balancing", angle_zero_deg=360.0,
            unbalance_unit="kg", due_soon_days=-1, angle_sense="sideways",
        )
    assert {"angle_zero_deg", "unbalance_unit", "due_soon_days", "angle_sense"} <= set(
        exc.value.errors
    )
    assert db.get(ShopSettings, 1) is None  # nothing written


def test_update_settings_writes_row_and_audit(db: Session, make_user):
    admin = make_user("admin")
    row = settings.update_settings(
        db, by=admin, shop_name="Vale Balancing", angle_zero_deg=90.0, unbalance_unit="oz·in",
        job_number_pattern="VB{yy}{month}-{seq:04d}", due_soon_days=0,
    )
    assert row.unbalance_unit == "oz·in" and row.due_soon_days == 0
    assert _actions(db, "shop_settings", 1) == ["update"]


def test_settings_are_admin_only(db: Session, make_user):
    with pytest.raises(PermissionDenied):
        settings.update_settings(db, by=make_user("quality"), shop_name="X")


@pytest.mark.parametrize("value", ["nan", "inf", "abc", None, -0.5])
def test_angle_zero_refuses_junk(db: Session, make_user, value):
    with pytest.raises(ValidationFailed) as exc:
        settings.update_settings(db, by=make_user("admin"), angle_zero_deg=value)
    assert exc.value.field == "angle_zero_deg"


@pytest.mark.parametrize(
    ("pattern", "sample"),
    [
        ("J{year}-{seq:05d}", "J2026-00042"),
        ("{seq}", "42"),
        ("W{yy}{month}-{seq:03d}", "W2603-042"),
    ],
)
def test_job_number_pattern_sample(pattern: str, sample: str):
    assert settings.check_job_number_pattern(pattern) == sample


@pytest.mark.parametrize(
    ("pattern", "words"),
    [
        ("J{year}", "{seq}"),
        ("J{seq}{seq}", "{seq}"),
        ("J{day}-{seq}", "{day}"),
        ("J{", "not a valid pattern"),
        ("{}", "unknown field"),
        ("J{seq:x}", "plain digits"),
        ("J{seq:.2f}", "plain digits"),
        ("J{seq:c}", "plain digits"),
        ("J{seq:999999999d}", "wider"),
        ("J {seq}", "spaces"),
        ("J/{seq}", "spaces or /"),
        ("", "required"),
        ("J" * 65 + "{seq}", "too long"),
    ],
)
def test_bad_job_number_patterns(pattern: str, words: str):
    with pytest.raises(ValidationFailed) as exc:
        settings.check_job_number_pattern(pattern)
    assert exc.value.field == "job_number_pattern"
    assert words in exc.value.message
