"""Where a demo load stands, in a small file of the instance folder every page reads.

The loader (``shopapp first-start``, ``shopapp demo load``) writes
``demo-status.json``: ``loading`` (with what is still missing), ``ready`` or
``failed`` (with the reason and the command that recovers). The app-wide base
template shows a ``loading`` or ``failed`` status on every page, the login
page included (:func:`notice`, registered by :mod:`shopapp.web.templating`).
"""

from __future__ import annotations

import datetime as dt
import json
import os
from dataclasses import dataclass
from pathlib import Path

STATUS_FILE = "demo-status.json"
STATES = ("loading", "ready", "failed")


@dataclass(frozen=True)
class DemoStatus:
    state: str  # loading | ready | failed
    message: str
    at: str  # when it was written (ISO 8601, UTC)

    @property
    def failed(self) -> bool:
        return self.state == "failed"


def status_path(instance_path: str | Path) -> Path:
    return Path(instance_path) / STATUS_FILE


def write_status(instance_path: str | Path, state: str, message: str) -> Path:
    """Replace the status file at once (readers never see half of it)."""
    if state not in STATES:
        raise ValueError(f"state: {state!r} is not one of {', '.join(STATES)}")
    path = status_path(instance_path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}")
    now = dt.datetime.now(dt.UTC).replace(microsecond=0).isoformat()
    tmp.write_text(json.dumps({"state": state, "message": message, "at": now}) + "\n")
    os.replace(tmp, path)
    return path


def read_status(instance_path: str | Path) -> DemoStatus | None:
    """The last status written, or None (no demo load here, or an unreadable file)."""
    try:
        data = json.loads(status_path(instance_path).read_text())
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("state") not in STATES:
        return None
    return DemoStatus(str(data["state"]), str(data.get("message", "")), str(data.get("at", "")))


def notice(instance_path: str | Path) -> DemoStatus | None:
    """What every page shows: a load still running or one that failed; else None."""
    status = read_status(instance_path)
    return status if status is not None and status.state != "ready" else None
