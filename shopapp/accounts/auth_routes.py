"""Log in, log out, one's own password, and the home page."""

from __future__ import annotations

from flask import Blueprint, flash, redirect, render_template, request, session, url_for
from flask_login import current_user, login_required, login_user, logout_user

from shopapp.accounts import logins, users
from shopapp.accounts.forms import LoginForm, OwnPasswordForm
from shopapp.core.extensions import db_session, login_manager, read_session
from shopapp.core.web import acting_user, form_page, safe_next, submit_form
from shopapp.models import User

bp = Blueprint("auth", __name__, template_folder="templates")

# The log-in session's copy of the user's session version (shopapp.accounts.logins).
SESSION_VERSION_KEY = "session_version"
SESSION_ENDED = ("Your session has ended: you logged out, or your password was changed or "
                 "reset. Please log in again.")


@login_manager.user_loader
def _load_user(user_id: str) -> User | None:
    user = users.load_active_user(db_session(), user_id)
    if user is None:
        return None
    if not logins.session_is_current(user, session.get(SESSION_VERSION_KEY)):
        session.clear()
        flash(SESSION_ENDED, "info")
        return None
    return user


#: What a user whose password an administrator gave may open before choosing an own one.
_OPEN_BEFORE_OWN_PASSWORD = frozenset({"auth.own_password", "auth.logout", "auth.login",
                                       "static"})


@bp.before_app_request
def _own_password_first():  # type: ignore[no-untyped-def]
    """Every page of a user with ``must_change_password`` leads to the password page (the
    JSON API answers its tokens as before: a token is made by its user, after a log-in)."""
    if (request.endpoint is None or request.endpoint in _OPEN_BEFORE_OWN_PASSWORD
            or "api" in request.blueprints):
        return None
    if current_user.is_authenticated and current_user.must_change_password:
        return redirect(url_for("auth.own_password"))
    return None


def _start_session(user: User) -> None:
    session.clear()
    session.permanent = True
    login_user(user)
    session[SESSION_VERSION_KEY] = user.session_version


@bp.route("/login", methods=["GET", "POST"])
def login():  # type: ignore[no-untyped-def]
    if current_user.is_authenticated:
        return redirect(url_for("auth.home"))
    form = LoginForm()
    status = 200
    headers: dict[str, str] = {}
    if request.method == "POST":
        if form.validate_on_submit():
            # The password is checked before the request takes the write lock (SQLite's is
            # the whole database's): a slow hash must not hold other people's saves up.
            with read_session() as reader:
                attempt = logins.check_attempt(reader, username=form.username.data or "",
                                               password=form.password.data or "",
                                               client=request.remote_addr)
            sess = db_session()
            outcome = logins.record_attempt(sess, attempt)
            # A failure is committed too: it counts towards the throttle and the audit trail.
            sess.commit()
            if outcome.user is not None:
                _start_session(outcome.user)
                return redirect(safe_next(request.args.get("next"), url_for("auth.home")))
            if outcome.locked_until is not None:
                form.password.errors.append(outcome.locked_message)
                headers["Retry-After"] = str(outcome.wait_s)
                return render_template("auth/login.html", form=form), 429, headers
            form.password.errors.append("Unknown username or wrong password.")
        status = 422 if form.errors else 400
    return render_template("auth/login.html", form=form), status


@bp.post("/logout")
@login_required
def logout():  # type: ignore[no-untyped-def]
    sess = db_session()
    logins.log_out(sess, acting_user(), client=request.remote_addr)
    sess.commit()
    logout_user()
    session.clear()
    flash("You are logged out.", "info")
    return redirect(url_for("auth.login"))


def _keep_this_session(user: User) -> tuple[str, str]:
    session[SESSION_VERSION_KEY] = user.session_version
    return ("Your password is changed; your sessions on other computers have ended.",
            url_for("auth.home"))


@bp.route("/account/password", methods=["GET", "POST"])
@login_required
def own_password():  # type: ignore[no-untyped-def]
    form = OwnPasswordForm()
    return submit_form(
        form, form_page("auth/own_password.html", form=form),
        lambda sess: users.change_own_password(
            sess, acting_user(), current_password=form.current_password.data or "",
            password=form.password.data or ""),
        done=_keep_this_session,
    )


@bp.get("/")
@login_required
def home():  # type: ignore[no-untyped-def]
    return render_template("home.html")
