"""App-wide web wiring: every feature's blueprints are registered here, by name.

Each feature package owns its routes (``shopapp/<feature>/*routes.py``) and its
templates (``shopapp/<feature>/templates/<blueprint>/``); this package keeps only
what is app-wide: blueprint registration, error pages, health, base templates.
"""

from __future__ import annotations

from flask import Blueprint, Flask

from shopapp.accounts import admin_routes, auth_routes, token_routes
from shopapp.certificates import routes as certificate_routes
from shopapp.imports import routes as import_routes
from shopapp.intake import routes as intake_routes
from shopapp.jobs import evidence_routes
from shopapp.jobs import routes as job_routes
from shopapp.measures import routes as measure_routes
from shopapp.registry import customer_routes, machine_routes, rotor_routes
from shopapp.resonance import routes as resonance_routes
from shopapp.traceability import routes as traceability_routes
from shopapp.web import health

BLUEPRINTS: tuple[Blueprint, ...] = (
    health.bp,
    auth_routes.bp,
    customer_routes.bp,
    rotor_routes.bp,
    machine_routes.bp,
    admin_routes.bp,
    token_routes.bp,
    job_routes.bp,
    evidence_routes.bp,
    certificate_routes.bp,
    measure_routes.bp,
    traceability_routes.bp,
    resonance_routes.bp,
    intake_routes.bp,
    import_routes.bp,
)


def register_web(app: Flask) -> None:
    """Register every feature's blueprint."""
    for blueprint in BLUEPRINTS:
        app.register_blueprint(blueprint)
