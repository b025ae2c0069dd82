"""Log in, log out, and the home page."""

from __future__ import annotations

from flask import Blueprint, flash, redirect, render_template, request, session, url_for
from flask_login import current_user, login_required, login_user, logout_user

from shopapp.accounts import users
from shopapp.accounts.forms import LoginForm
from shopapp.core.extensions import db_session, login_manager
from shopapp.core.web import safe_next
from shopapp.models import User

bp = Blueprint("auth", __name__, template_folder="templates")


@login_manager.user_loader
def _load_user(user_id: str) -> User | None:
    return users.load_active_user(db_session(), user_id)


@bp.route("/login", methods=["GET", "POST"])
def login():  # type: ignore[no-untyped-def]
    if current_user.is_authenticated:
        return redirect(url_for("auth.home"))
    form = LoginForm()
    status = 200
    if request.method == "POST":
        if form.validate_on_submit():
            sess = db_session()
            user = users.authenticate(sess, form.username.data or "", form.password.data or "")
            if user is not None:
                sess.commit()
                session.clear()
                session.permanent = True
                login_user(user)
                return redirect(safe_next(request.args.get("next"), url_for("auth.home")))
            form.password.errors.append("Unknown username or wrong password.")
        status = 422 if form.errors else 400
    return render_template("auth/login.html", form=form), status


@bp.post("/logout")
@login_required
def logout():  # type: ignore[no-untyped-def]
    logout_user()
    session.clear()
    flash("You are logged out.", "info")
    return redirect(url_for("auth.login"))


@bp.get("/")
@login_required
def home():  # type: ignore[no-untyped-def]
    return render_template("home.html")
