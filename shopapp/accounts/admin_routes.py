"""Admin: user accounts (add, role, deactivate, password) and the shop's settings."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

from flask import Blueprint, flash, redirect, render_template, request, url_for

from shopapp.accounts import logins, users
from shopapp.accounts.forms import AddUserForm, PasswordForm, RoleForm, SettingsForm
from shopapp.core import clock
from shopapp.core import settings as shop_settings
from shopapp.core.errors import ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.forms import ConfirmForm
from shopapp.core.web import (
    acting_user,
    form_page,
    get_or_404,
    request_page,
    requires,
    submit_form,
)
from shopapp.models import User

bp = Blueprint("admin", __name__, url_prefix="/admin", template_folder="templates")


def _users_page(
    add_form: AddUserForm | None = None,
    *,
    status: int = 200,
    row_errors: dict[int, str] | None = None,
    loose: Sequence[str] = (),
):  # type: ignore[no-untyped-def]
    return (
        render_template(
            "admin/users.html",
            users=users.list_users(db_session()),
            add_form=add_form or AddUserForm(formdata=None),
            role_form=RoleForm(formdata=None),
            confirm=ConfirmForm(formdata=None),
            row_errors=row_errors or {},
            loose=loose,
        ),
        status,
    )


@bp.route("/users", methods=["GET", "POST"], endpoint="users")
@requires("manage_users")
def users_page():  # type: ignore[no-untyped-def]
    if request.method == "GET":
        return _users_page()
    form = AddUserForm()
    return submit_form(
        form, lambda status, loose: _users_page(form, status=status, loose=loose),
        lambda sess: users.create_user(
            sess, username=form.username.data or "", full_name=form.full_name.data or "",
            role=form.role.data or "", password=form.password.data or "", by=acting_user()),
        done=lambda u: (f"User {u.username} ({u.role}) added.", url_for("admin.users")),
    )


def _row_change(user_id: int, field: str, change: Callable[[Any, User], User],
                done: Callable[[User], str]):  # type: ignore[no-untyped-def]
    """One change to a user row of the users page (role, active): one transaction; a
    refusal is shown in that row."""
    sess = db_session()
    user = get_or_404(sess, User, user_id)
    try:
        change(sess, user)
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        return _users_page(status=422, row_errors={user_id: exc.errors.get(field, exc.message)})
    flash(done(user), "success")
    return redirect(url_for("admin.users"))


@bp.post("/users/<int:user_id>/role")
@requires("manage_users")
def user_role(user_id: int):  # type: ignore[no-untyped-def]
    form = RoleForm()
    if not form.validate_on_submit():
        message = "; ".join(form.role.errors) or "Choose a role."
        get_or_404(db_session(), User, user_id)
        return _users_page(status=422, row_errors={user_id: message})
    return _row_change(
        user_id, "role", lambda sess, user: users.set_role(sess, user, by=acting_user(),
                                                            role=form.role.data),
        lambda user: f"{user.username} is now {user.role}.",
    )


@bp.post("/users/<int:user_id>/active")
@requires("manage_users")
def user_active(user_id: int):  # type: ignore[no-untyped-def]
    active = request.form.get("active") == "1"
    return _row_change(
        user_id, "active", lambda sess, user: users.set_active(sess, user, by=acting_user(),
                                                                active=active),
        lambda user: f"{user.username} {'reactivated' if active else 'deactivated'}.",
    )


@bp.route("/users/<int:user_id>/password", methods=["GET", "POST"])
@requires("manage_users")
def user_password(user_id: int):  # type: ignore[no-untyped-def]
    user = get_or_404(db_session(), User, user_id)
    form = PasswordForm()
    return submit_form(
        form, form_page("admin/password.html", form=form, user=user),
        lambda sess: users.reset_password(sess, user, by=acting_user(),
                                          password=form.password.data or ""),
        done=lambda u: (f"New password set for {u.username}.", url_for("admin.users")),
    )


@bp.get("/logins")
@requires("manage_users")
def logins_page():  # type: ignore[no-untyped-def]
    """Recent failed log-ins and locks (paginated), and the locks in force now."""
    sess = db_session()
    return render_template(
        "admin/logins.html",
        page=request_page(sess, logins.recent_failures_query()),
        locks=logins.active_locks(sess, by=acting_user()),
        confirm=ConfirmForm(formdata=None),
        **logins.policy_figures(),
    )


@bp.post("/logins/unlock")
@requires("manage_users")
def end_lock():  # type: ignore[no-untyped-def]
    kind = request.form.get("kind", "")[:8]
    subject = request.form.get("subject", "")[:100]
    sess = db_session()
    lifted = logins.end_lock(sess, kind=kind, subject=subject, by=acting_user())
    sess.commit()
    what = "username" if kind == "account" else "client"
    flash(f"Log-ins for {what} {subject!r} are open again." if lifted
          else f"No lock for {what} {subject!r}.", "success" if lifted else "info")
    return redirect(url_for("admin.logins_page"))


def _sample(pattern: str) -> tuple[str | None, str | None]:
    """(sample number, None) for a good pattern, (None, message) for a bad one."""
    try:
        return shop_settings.check_job_number_pattern(pattern.strip()), None
    except ValidationFailed as exc:
        return None, exc.errors.get("job_number_pattern", exc.message)


@bp.route("/settings", methods=["GET", "POST"])
@requires("edit_settings")
def settings():  # type: ignore[no-untyped-def]
    current = shop_settings.get_settings(db_session())
    form = SettingsForm(obj=current if request.method == "GET" else None)

    def page(status: int, loose: Sequence[str]):  # type: ignore[no-untyped-def]
        sample, _error = _sample(form.job_number_pattern.data or "")
        return (
            render_template("admin/settings.html", form=form, sample=sample, loose=loose,
                            zone=clock.shop_zone_name(), now=clock.shop_now()),
            status,
        )

    return submit_form(
        form, page,
        lambda sess: shop_settings.update_settings(
            sess, by=acting_user(),
            **{name: getattr(form, name).data for name in shop_settings.SETTINGS_FIELDS}),
        done=lambda _: ("Settings saved.", url_for("admin.settings")),
    )


@bp.get("/settings/job-number-sample")
@requires("edit_settings")
def job_number_sample():  # type: ignore[no-untyped-def]
    """The sample number for a typed pattern (the settings page's live preview)."""
    sample, error = _sample(request.args.get("pattern", "")[:200])
    return {"sample": sample, "error": error}
