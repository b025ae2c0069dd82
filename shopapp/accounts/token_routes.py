"""API tokens page: a person makes and revokes their own tokens; an admin anyone's.

The secret is shown once, on the page that answers the POST that made it (never in a
flash message, which would sit in the session cookie), and only its hash is kept.
"""

from __future__ import annotations

from typing import Any

from flask import Blueprint, flash, redirect, render_template, request, url_for
from wtforms import StringField
from wtforms.validators import InputRequired, Length

from shopapp.accounts import api_tokens
from shopapp.core.errors import ServiceError, ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.forms import ConfirmForm, ShopForm, apply_errors
from shopapp.core.web import acting_user, get_or_404, requires
from shopapp.models import ApiToken, User

bp = Blueprint("api_tokens", __name__, template_folder="templates")


class TokenForm(ShopForm):
    name = StringField("What the token is for", validators=[
        InputRequired("Name the token (e.g. the script that uses it)."), Length(max=100)])


def _page(owner: User, form: TokenForm | None = None, *, secret: str = "", status: int = 200,
          loose: list[str] | None = None) -> Any:
    sess = db_session()
    by = acting_user()
    return render_template(
        "account/api_tokens.html", owner=owner, own=owner.id == by.id,
        tokens=api_tokens.tokens_of(sess, by=by, user=owner),
        form=form or TokenForm(formdata=None), confirm=ConfirmForm(formdata=None),
        secret=secret, loose=loose or []), status


def _create(owner: User) -> Any:
    form = TokenForm()
    if not form.validate_on_submit():
        return _page(owner, form, status=422)
    sess = db_session()
    try:
        made = api_tokens.create_token(sess, by=acting_user(), user=owner,
                                       name=form.name.data or "")
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        return _page(owner, form, status=422, loose=list(apply_errors(form, exc)))
    except ServiceError as exc:
        sess.rollback()
        return _page(owner, form, status=exc.status, loose=[exc.message])
    return _page(owner, secret=made.secret, status=201)


@bp.route("/account/api-tokens", methods=["GET", "POST"], endpoint="mine")
@requires("read")
def mine() -> Any:
    owner = acting_user()
    return _create(owner) if request.method == "POST" else _page(owner)


@bp.route("/admin/users/<int:user_id>/api-tokens", methods=["GET", "POST"], endpoint="of_user")
@requires("manage_users")
def of_user(user_id: int) -> Any:
    owner = get_or_404(db_session(), User, user_id)
    return _create(owner) if request.method == "POST" else _page(owner)


@bp.post("/api-tokens/<int:token_id>/revoke", endpoint="revoke")
@requires("read")
def revoke(token_id: int) -> Any:
    sess = db_session()
    form = ConfirmForm()
    token = get_or_404(sess, ApiToken, token_id)
    owner = token.user
    by = acting_user()
    back = (url_for("api_tokens.mine") if owner.id == by.id
            else url_for("api_tokens.of_user", user_id=owner.id))
    if not form.validate_on_submit():
        return _page(owner, status=400, loose=["The form expired; try again."])
    try:
        api_tokens.revoke_token(sess, token, by=by)
        sess.commit()
    except ServiceError as exc:
        sess.rollback()
        return _page(owner, status=exc.status, loose=[exc.message])
    flash(f"Token {token.prefix}… ({token.name}) revoked; it no longer works.", "success")
    return redirect(back)
