"""The uploaded file between its preview and its confirmation, kept on the server.

The import page shows what a file would do and applies exactly that file when the
person confirms: the bytes stay in the instance folder under their SHA-256 (the name
carries nothing from the person), the confirmation names that digest, and the bytes are
hashed again before use. A kept file is removed once applied, and any older than
:data:`KEEP_SECONDS` at the next preview.
"""

from __future__ import annotations

import hashlib
import re
import time
from pathlib import Path

from shopapp.core.errors import ValidationFailed

KEEP_SECONDS = 24 * 3600
_DIGEST = re.compile(r"[0-9a-f]{64}")


def _path(folder: Path, sha256: str) -> Path:
    if not _DIGEST.fullmatch(sha256):
        raise ValidationFailed("sha256", "is not a file's SHA-256; upload the file again")
    return folder / f"{sha256}.upload"


def put(folder: Path, data: bytes) -> str:
    """Keep ``data``; its SHA-256 (hex), the key to :func:`get` it back."""
    folder.mkdir(parents=True, exist_ok=True)
    prune(folder)
    sha256 = hashlib.sha256(data).hexdigest()
    _path(folder, sha256).write_bytes(data)
    return sha256


def get(folder: Path, sha256: str) -> bytes:
    """The bytes kept under ``sha256``, checked against it.

    Raises
    ------
    ValidationFailed
        Field ``sha256``: nothing kept under it (applied already, or removed after a day),
        or the bytes no longer match.
    """
    path = _path(folder, sha256)
    if not path.is_file():
        raise ValidationFailed("sha256", "the previewed file is no longer kept (applied "
                               "already, or older than a day); upload it again")
    data = path.read_bytes()
    if hashlib.sha256(data).hexdigest() != sha256:
        raise ValidationFailed("sha256", "the kept file changed since its preview; upload "
                               "it again")
    return data


def drop(folder: Path, sha256: str) -> None:
    """Forget the file kept under ``sha256`` (after it was applied)."""
    _path(folder, sha256).unlink(missing_ok=True)


def prune(folder: Path, now: float | None = None) -> None:
    """Remove kept files older than :data:`KEEP_SECONDS`."""
    limit = (now if now is not None else time.time()) - KEEP_SECONDS
    for path in folder.glob("*.upload"):
        if path.stat().st_mtime < limit:
            path.unlink(missing_ok=True)
