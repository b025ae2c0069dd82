"""Server-rendered pages: one blueprint per area (``shopapp/web/<area>/routes.py``)."""

from __future__ import annotations

import importlib

from flask import Flask

# Every area's blueprint, as (module, attribute).
BLUEPRINTS: tuple[str, ...] = (
    "shopapp.web.health",
    "shopapp.web.auth.routes",
    "shopapp.web.customers.routes",
    "shopapp.web.rotors.routes",
    "shopapp.web.machines.routes",
    "shopapp.web.admin.routes",
    "shopapp.web.jobs.routes",
    "shopapp.web.certificates.routes",
    "shopapp.web.dashboard.routes",
    "shopapp.web.traceability.routes",
    "shopapp.api.routes",
)


def register_web(app: Flask) -> None:
    """Register every blueprint of the web layer (areas not yet written are skipped)."""
    for module_name in BLUEPRINTS:
        try:
            module = importlib.import_module(module_name)
        except ModuleNotFoundError as exc:
            if exc.name is not None and module_name.startswith(exc.name):
                continue
            raise
        app.register_blueprint(module.bp)
