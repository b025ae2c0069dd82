"""Server-rendered pages: one blueprint per area (``shopapp/web/<area>/``)."""

from __future__ import annotations

from flask import Flask


def register_web(app: Flask) -> None:
    """Register every blueprint of the web layer."""
    from shopapp.web.auth.routes import bp as auth_bp
    from shopapp.web.health import bp as health_bp

    app.register_blueprint(health_bp)
    app.register_blueprint(auth_bp)
