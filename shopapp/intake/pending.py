"""Uploaded files waiting between their preview and their confirmation, kept server-side.

The preview page shows what a file would do and writes nothing to the database; its
bytes wait here, under ``<instance>/intake-pending/<sha256>``, so the confirmation imports
exactly the previewed bytes (checked against their hash again) and the browser never
sends them twice. Files older than :data:`KEEP_S` are removed at the next upload.
"""

from __future__ import annotations

import re
import time
from pathlib import Path

KEEP_S = 24 * 3600
_SHA = re.compile(r"[0-9a-f]{64}")


def _folder(instance_path: str) -> Path:
    folder = Path(instance_path) / "intake-pending"
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def put(instance_path: str, sha256: str, data: bytes) -> None:
    """Keep ``data`` under its hash (written whole, then renamed into place)."""
    folder = _folder(instance_path)
    now = time.time()
    for old in folder.iterdir():
        if now - old.stat().st_mtime > KEEP_S:
            old.unlink(missing_ok=True)
    partial = folder / f".{sha256}.part"
    partial.write_bytes(data)
    partial.replace(folder / sha256)


def get(instance_path: str, sha256: str) -> bytes | None:
    """The bytes kept under ``sha256``, or None when they are not (or no longer) there."""
    if not _SHA.fullmatch(sha256):
        return None
    path = _folder(instance_path) / sha256
    return path.read_bytes() if path.is_file() else None


def drop(instance_path: str, sha256: str) -> None:
    """Forget the bytes kept under ``sha256`` (after their import)."""
    if _SHA.fullmatch(sha256):
        (_folder(instance_path) / sha256).unlink(missing_ok=True)
