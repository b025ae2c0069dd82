"""shopapp: jobs, calculations and certificates for a rotor-balancing shop.

``create_app(config=None)`` builds the Flask application in small named steps.
"""

from __future__ import annotations

import datetime as dt
import logging
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from flask import Flask, request
from werkzeug.middleware.proxy_fix import ProxyFix

from shopapp.core import clock
from shopapp.core.config import check_config, load_config
from shopapp.core.database import Database
from shopapp.core.extensions import close_db_session, csrf, login_manager
from shopapp.core.logging_setup import configure_logging

__version__ = "0.1.0"

log = logging.getLogger("shopapp")


def create_app(config: Mapping[str, Any] | None = None) -> Flask:
    """Build the application.

    Configuration precedence: defaults → ``instance/shopapp.toml`` →
    ``SHOPAPP_*`` environment variables → ``config``.
    """
    cfg = load_config(config)
    check_config(cfg)
    # The shop's days (today, the day of a moment) for every page, form and command.
    clock.set_shop_zone(cfg.get("TIME_ZONE"))
    app = Flask(
        __name__,
        instance_path=cfg["INSTANCE_PATH"],
        template_folder="web/templates",
        static_folder="web/static",
    )
    app.config.update(cfg)
    app.config["SHOPAPP_VERSION"] = __version__
    app.config["PERMANENT_SESSION_LIFETIME"] = dt.timedelta(
        minutes=int(cfg["SESSION_LIFETIME_MINUTES"])
    )
    # A form's anti-forgery token lives as long as the session it is kept in (the session
    # ends after SESSION_LIFETIME_MINUTES without use). Flask-WTF's own one-hour limit
    # refused a run typed before lunch, and a login page left open, as "expired or forged".
    app.config["WTF_CSRF_TIME_LIMIT"] = None
    # Flask's defaults already hold these keys, so setdefault would never apply them.
    app.config["SESSION_COOKIE_HTTPONLY"] = True
    app.config["SESSION_COOKIE_SAMESITE"] = cfg.get("SESSION_COOKIE_SAMESITE") or "Lax"
    if str(cfg.get("BASE_URL") or "").startswith("https://"):
        app.config["SESSION_COOKIE_SECURE"] = True
        app.config["REMEMBER_COOKIE_SECURE"] = True
    configure_logging(str(cfg.get("LOG_LEVEL", "INFO")))
    register_proxies(app)
    register_database(app)
    register_extensions(app)
    register_request_guards(app)
    register_blueprints(app)
    register_errorhandlers(app)
    register_security_headers(app)
    register_template_helpers(app)
    register_commands(app)
    return app


def register_proxies(app: Flask) -> None:
    """Behind ``TRUSTED_PROXIES`` reverse proxies, take the client's address (the log-in
    throttle's per-client count) and scheme from their X-Forwarded-* headers."""
    hops = int(app.config.get("TRUSTED_PROXIES") or 0)
    if hops > 0:
        app.wsgi_app = ProxyFix(app.wsgi_app, x_for=hops, x_proto=hops)  # type: ignore[method-assign]


def register_database(app: Flask) -> None:
    url = str(app.config["DATABASE_URL"])
    if url.startswith("sqlite:///") and not url.startswith("sqlite:///:memory:"):
        Path(url.removeprefix("sqlite:///")).parent.mkdir(parents=True, exist_ok=True)
    app.extensions["shopapp.db"] = Database(url, echo=bool(app.config.get("SQL_ECHO")))
    app.teardown_appcontext(close_db_session)


def register_extensions(app: Flask) -> None:
    csrf.init_app(app)
    login_manager.init_app(app)
    login_manager.login_view = "auth.login"
    # Said to someone never logged in and to someone whose session ran out alike: the
    # server cannot tell them apart once the cookie has expired.
    from shopapp.core.web import session_end_notice

    login_manager.login_message = ("Please log in to see that page. "
                                   + session_end_notice(app.config["PERMANENT_SESSION_LIFETIME"]))
    login_manager.session_protection = "strong"


def register_request_guards(app: Flask) -> None:
    from shopapp.web.guards import register_guards

    register_guards(app)


def register_blueprints(app: Flask) -> None:
    from shopapp.api import register_api
    from shopapp.web import register_web

    register_web(app)
    register_api(app)


def register_errorhandlers(app: Flask) -> None:
    from shopapp.web.errors import register_error_pages

    register_error_pages(app)


def register_security_headers(app: Flask) -> None:
    https = str(app.config.get("BASE_URL") or "").startswith("https://")

    @app.after_request
    def _headers(response):  # type: ignore[no-untyped-def]
        response.headers.setdefault("X-Content-Type-Options", "nosniff")
        response.headers.setdefault("X-Frame-Options", "DENY")
        response.headers.setdefault("Referrer-Policy", "same-origin")
        response.headers.setdefault(
            "Content-Security-Policy",
            "default-src 'self'; img-src 'self' data:; style-src 'self' 'unsafe-inline'; "
            "script-src 'self'; frame-ancestors 'none'; form-action 'self'",
        )
        response.headers.setdefault("Permissions-Policy", "camera=(), microphone=()")
        if https:
            response.headers.setdefault("Strict-Transport-Security", "max-age=31536000")
        if request.endpoint != "static":
            # Pages and files carry shop data: no shared or back-button caches keep them.
            response.headers.setdefault("Cache-Control", "no-store")
        return response


def register_commands(app: Flask) -> None:
    from shopapp.cli import register_commands as _register

    _register(app)


def register_template_helpers(app: Flask) -> None:
    from shopapp.web.templating import register_helpers

    register_helpers(app)
