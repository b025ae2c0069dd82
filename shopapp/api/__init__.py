"""The JSON API (``/api/v1``): a thin edge over the same use-cases as the pages.

Layered beside :mod:`shopapp.web` (docs/architecture.md): it imports the features and
the shared layers, and nothing imports it but ``create_app``. Each resource module
declares its operations (:func:`shopapp.api.operations.operation`); the OpenAPI
document and the docs page are generated from those declarations.
"""

from __future__ import annotations

from typing import Any

from flask import Blueprint, Flask, Request, Response, current_app, jsonify, render_template
from flask.sessions import SessionInterface, SessionMixin

from shopapp.api import calc, certificates, jobs, measures, registry
from shopapp.api.errors import register_error_handlers
from shopapp.api.openapi import document
from shopapp.api.operations import API_PREFIX, OPERATIONS
from shopapp.core.extensions import csrf

bp = Blueprint("api", __name__, url_prefix=API_PREFIX, template_folder="templates")
RESOURCES = (registry.bp, jobs.bp, certificates.bp, measures.bp, calc.bp)


@bp.get("/openapi.json")
def openapi_json() -> Response:
    return jsonify(document(current_app.config["SHOPAPP_VERSION"]))


@bp.get("/docs")
def docs() -> str:
    """A plain page listing the operations (no script or style from elsewhere)."""
    return render_template("api/docs.html", operations=OPERATIONS, prefix=API_PREFIX)


for _resource in RESOURCES:
    bp.register_blueprint(_resource)
register_error_handlers(bp)


class WithoutSessionUnderApi(SessionInterface):
    """The app's own session interface, except under /api (known paths or not): there a
    null session, so a
    page login's cookie is neither read (it authorises nothing) nor refreshed, and an
    accidental write to the session fails loudly instead of setting a cookie."""

    def __init__(self, inner: SessionInterface) -> None:
        self.inner = inner

    def open_session(self, app: Flask, request: Request) -> SessionMixin | None:
        if request.path == "/api" or request.path.startswith("/api/"):
            return self.make_null_session(app)
        return self.inner.open_session(app, request)

    def save_session(self, app: Flask, session: SessionMixin, response: Any) -> None:
        self.inner.save_session(app, session, response)


def register_api(app: Flask) -> None:
    """Mount the API; it takes no CSRF token and no session cookie (only a bearer token
    authorises it, and a cross-site form cannot send one)."""
    for blueprint in (bp, *RESOURCES):
        csrf.exempt(blueprint)
    app.session_interface = WithoutSessionUnderApi(app.session_interface)
    app.register_blueprint(bp)
