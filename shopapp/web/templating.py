"""App-wide template helpers: the role check for menus and the display formatter as filters.

Every page also gets ``demo_notice``: a demo load still running or one that
failed (:func:`shopapp.demo.status.notice`), shown by ``base.html``.

Pages print every number through :mod:`shopapp.core.display` (``|num``,
``|qty(unit)``, ``|pct``, ``|isodate``), so a page, a CSV and a PDF show the same
figures and never scientific notation.
"""

from __future__ import annotations

from typing import Any

from flask import Flask
from flask_login import current_user

from shopapp.core import display
from shopapp.core.permissions import can
from shopapp.demo.status import notice as demo_notice


def register_helpers(app: Flask) -> None:
    """Install the template globals and filters."""
    app.add_template_filter(display.number, "num")
    app.add_template_filter(display.quantity, "qty")
    app.add_template_filter(display.percent, "pct")
    app.add_template_filter(display.of_limit, "of_limit")
    app.add_template_filter(display.date, "isodate")
    app.add_template_filter(display.plain, "plain")
    app.add_template_filter(display.counted, "counted")

    @app.context_processor
    def _inject() -> dict[str, Any]:
        return {
            "can": lambda action: can(current_user, action) if current_user else False,
            "endpoints": app.view_functions,
            "demo_notice": demo_notice(app.instance_path),
        }
