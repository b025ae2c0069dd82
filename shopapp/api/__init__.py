"""The JSON API (``/api/v1``): a thin edge over the same use-cases as the pages.

Layered beside :mod:`shopapp.web` (docs/architecture.md): it imports the features and
the shared layers, and nothing imports it but ``create_app``. Each resource module
declares its operations (:func:`shopapp.api.operations.operation`); the OpenAPI
document and the docs page are generated from those declarations.
"""

from __future__ import annotations

from flask import Blueprint, Flask, Response, current_app, jsonify, render_template

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


def register_api(app: Flask) -> None:
    """Mount the API; it takes no CSRF token (no cookie can authorise it)."""
    for blueprint in (bp, *RESOURCES):
        csrf.exempt(blueprint)
    app.register_blueprint(bp)
