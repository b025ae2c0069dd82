"""Seconds from a first start on an empty database to the logins and to a loaded demo.

Runs ``shopapp db upgrade`` and ``shopapp first-start`` (as ``scripts/serve`` does) in a
fresh instance folder on SQLite and watches for ``first-logins.txt`` and for
``demo-status.json`` saying ``ready``, timed from the start of ``db upgrade`` (where
``scripts/serve`` is once its install is done). Goals (issue 13): logins within 15 s, the
whole demo (with its ~700 signed historical certificates) within 60 s.
"""

from __future__ import annotations

import json
import os
import secrets
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parent.parent
SHOPAPP = str(ROOT / ".venv" / "bin" / "shopapp")
LOGINS_GOAL_S = 15.0
READY_GOAL_S = 60.0
TIMEOUT_S = 600.0


def bench_firststart() -> dict[str, Any]:
    with tempfile.TemporaryDirectory(prefix="shopapp-firststart-") as tmp:
        folder = Path(tmp)
        env = dict(os.environ)
        env.update({"SHOPAPP_INSTANCE_PATH": str(folder),
                    "SHOPAPP_DATABASE_URL": f"sqlite:///{folder / 'shop.sqlite3'}",
                    "SHOPAPP_SECRET_KEY": secrets.token_hex(16)})
        start = time.perf_counter()
        subprocess.run([SHOPAPP, "db", "upgrade"], env=env, check=True, capture_output=True)
        proc = subprocess.Popen([SHOPAPP, "first-start"], env=env, stdout=subprocess.DEVNULL,
                                stderr=subprocess.DEVNULL)
        logins_s = ready_s = None
        try:
            while time.perf_counter() - start < TIMEOUT_S:
                now = time.perf_counter() - start
                if logins_s is None and (folder / "first-logins.txt").is_file():
                    logins_s = now
                status = folder / "demo-status.json"
                if status.is_file():
                    try:
                        state = json.loads(status.read_text()).get("state")
                    except ValueError:  # caught mid-write
                        state = None
                    if state == "ready":
                        ready_s = now
                        break
                    if state == "failed":
                        raise RuntimeError("bench: the demo load failed")
                if proc.poll() is not None and ready_s is None and logins_s is not None:
                    ready_s = now
                    break
                time.sleep(0.2)
        finally:
            if proc.poll() is None:
                proc.terminate()
                proc.wait(timeout=30)
    out: dict[str, Any] = {"logins_s": None if logins_s is None else round(logins_s, 1),
                           "ready_s": None if ready_s is None else round(ready_s, 1)}
    out["goals"] = [
        {"name": "firststart_logins_s", "value": out["logins_s"], "goal": LOGINS_GOAL_S,
         "met": logins_s is not None and logins_s <= LOGINS_GOAL_S},
        {"name": "firststart_ready_s", "value": out["ready_s"], "goal": READY_GOAL_S,
         "met": ready_s is not None and ready_s <= READY_GOAL_S},
    ]
    return out


def main(argv: list[str] | None = None) -> dict[str, Any]:
    """Print ``{"firststart": {...}}`` and return it (``scripts/bench firststart``)."""
    result = bench_firststart()
    print(json.dumps({"firststart": result}))
    return result


if __name__ == "__main__":
    main(sys.argv[1:])
