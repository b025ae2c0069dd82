"""``GET /healthz``: version, backend and whether the schema is at the newest migration."""

from __future__ import annotations

import logging

from flask import Blueprint, current_app, jsonify
from sqlalchemy.exc import SQLAlchemyError

from shopapp.core import schema
from shopapp.core.extensions import get_database

bp = Blueprint("health", __name__)
log = logging.getLogger("shopapp.health")


@bp.get("/healthz")
def healthz():  # type: ignore[no-untyped-def]
    version = current_app.config["SHOPAPP_VERSION"]

    db = get_database()
    body: dict[str, object] = {"version": version, "database": db.backend}
    try:
        current = schema.current_revision(db.engine)
        head = schema.head_revision(db.url)
        body.update(schema_revision=current, schema_head=head, schema_current=current == head)
        healthy = current == head
    except SQLAlchemyError as exc:
        log.warning("healthz: database not reachable: %s", exc.__class__.__name__)
        body.update(schema_current=False, error="database not reachable")
        healthy = False
    body["status"] = "ok" if healthy else "unhealthy"
    return jsonify(body), 200 if healthy else 503
