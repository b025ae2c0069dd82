"""Admin: user accounts (add, role, deactivate, password) and the shop's settings."""

from __future__ import annotations

from typing import Any

from flask import Blueprint, flash, redirect, render_template, request, url_for
from flask_login import current_user

from shopapp.accounts import users
from shopapp.accounts.admin_forms import AddUserForm, PasswordForm, RoleForm, SettingsForm
from shopapp.core import settings as shop_settings
from shopapp.core.errors import ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.forms import ConfirmForm, apply_errors
from shopapp.core.web import get_or_404, requires
from shopapp.models import User

bp = Blueprint("admin", __name__, url_prefix="/admin", template_folder="templates")


def _users_page(
    add_form: AddUserForm | None = None,
    *,
    status: int = 200,
    row_errors: dict[int, str] | None = None,
    loose: list[str] | tuple[str, ...] = (),
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
    if not form.validate_on_submit():
        return _users_page(form, status=422)
    sess = db_session()
    try:
        user = users.create_user(
            sess,
            username=form.username.data or "",
            full_name=form.full_name.data or "",
            role=form.role.data or "",
            password=form.password.data or "",
            by=current_user._get_current_object(),
        )
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        return _users_page(form, status=422, loose=apply_errors(form, exc))
    flash(f"User {user.username} ({user.role}) added.", "success")
    return redirect(url_for("admin.users"))


@bp.post("/users/<int:user_id>/role")
@requires("manage_users")
def user_role(user_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    user = get_or_404(sess, User, user_id)
    form = RoleForm()
    if not form.validate_on_submit():
        message = "; ".join(form.role.errors) or "Choose a role."
        return _users_page(status=422, row_errors={user_id: message})
    try:
        users.set_role(sess, user, by=current_user._get_current_object(), role=form.role.data)
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        return _users_page(status=422, row_errors={user_id: exc.errors.get("role", exc.message)})
    flash(f"{user.username} is now {user.role}.", "success")
    return redirect(url_for("admin.users"))


@bp.post("/users/<int:user_id>/active")
@requires("manage_users")
def user_active(user_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    user = get_or_404(sess, User, user_id)
    active = request.form.get("active") == "1"
    try:
        users.set_active(sess, user, by=current_user._get_current_object(), active=active)
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        return _users_page(status=422, row_errors={user_id: exc.errors.get("active", exc.message)})
    flash(f"{user.username} {'reactivated' if active else 'deactivated'}.", "success")
    return redirect(url_for("admin.users"))


@bp.route("/users/<int:user_id>/password", methods=["GET", "POST"])
@requires("manage_users")
def user_password(user_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    user = get_or_404(sess, User, user_id)
    form = PasswordForm()

    def page(status: int, loose: Any = ()):  # type: ignore[no-untyped-def]
        return render_template("admin/password.html", form=form, user=user, loose=loose), status

    if request.method == "GET":
        return page(200)
    if not form.validate_on_submit():
        return page(422)
    try:
        users.reset_password(
            sess, user, by=current_user._get_current_object(), password=form.password.data or ""
        )
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        user = get_or_404(sess, User, user_id)
        return page(422, apply_errors(form, exc))
    flash(f"New password set for {user.username}.", "success")
    return redirect(url_for("admin.users"))


def _sample(pattern: str) -> tuple[str | None, str | None]:
    """(sample number, None) for a good pattern, (None, message) for a bad one."""
    try:
        return shop_settings.check_job_number_pattern(pattern.strip()), None
    except ValidationFailed as exc:
        return None, exc.errors.get("job_number_pattern", exc.message)


@bp.route("/settings", methods=["GET", "POST"])
@requires("edit_settings")
def settings():  # type: ignore[no-untyped-def]
    sess = db_session()
    current = shop_settings.get_settings(sess)
    form = SettingsForm(obj=current if request.method == "GET" else None)

    def page(status: int, loose: Any = ()):  # type: ignore[no-untyped-def]
        sample, _error = _sample(form.job_number_pattern.data or "")
        return (
            render_template("admin/settings.html", form=form, sample=sample, loose=loose),
            status,
        )

    if request.method == "GET":
        return page(200)
    if not form.validate_on_submit():
        return page(422)
    try:
        shop_settings.update_settings(
            sess,
            by=current_user._get_current_object(),
            **{name: getattr(form, name).data for name in shop_settings.SETTINGS_FIELDS},
        )
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        return page(422, apply_errors(form, exc))
    flash("Settings saved.", "success")
    return redirect(url_for("admin.settings"))


@bp.get("/settings/job-number-sample")
@requires("edit_settings")
def job_number_sample():  # type: ignore[no-untyped-def]
    """The sample number for a typed pattern (the settings page's live preview)."""
    sample, error = _sample(request.args.get("pattern", "")[:200])
    return {"sample": sample, "error": error}
