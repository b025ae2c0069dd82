"""Plain, greppable logging to stderr: one line per record."""

from __future__ import annotations

import logging
import sys

FORMAT = "%(asctime)s %(levelname)s %(name)s: %(message)s"


def configure_logging(level: str = "INFO") -> None:
    """Send shopapp's records to stderr in one fixed format (idempotent)."""
    root = logging.getLogger("shopapp")
    root.setLevel(level.upper() if isinstance(level, str) else level)
    if not any(getattr(h, "_shopapp", False) for h in root.handlers):
        handler = logging.StreamHandler(sys.stderr)
        handler.setFormatter(logging.Formatter(FORMAT, "%Y-%m-%dT%H:%M:%S"))
        handler._shopapp = True  # type: ignore[attr-defined]
        root.addHandler(handler)
    root.propagate = False
