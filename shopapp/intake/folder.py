"""The watched folder: which files are ready, and where each goes after its import.

File handling only (no database): ``shopapp intake watch`` imports each ready file in
its own transaction and moves it only after the commit — to ``done/``, or to
``refused/`` with ``<name>.why.txt`` beside it. A process stopped mid-file leaves the
file where it was; the next scan imports it again from the start, or, when its commit
had already happened, finds its hash among the imported files and only moves it.
"""

from __future__ import annotations

import time
from pathlib import Path

DONE = "done"
REFUSED = "refused"
# Names a machine PC (or an editor) gives a file still being written.
PARTIAL_SUFFIXES = (".tmp", ".part", ".partial", ".lock", ".why.txt")


def ready_files(folder: Path, *, settle_s: float = 2.0, now: float | None = None) -> list[Path]:
    """Files in ``folder`` (not its sub-folders) ready to import, oldest first.

    Hidden and partial names are left alone, and so is a file changed within the last
    ``settle_s`` seconds (the machine may still be writing it).
    """
    moment = time.time() if now is None else now
    found: list[tuple[float, str, Path]] = []
    for path in folder.iterdir():
        if not path.is_file() or path.name.startswith("."):
            continue
        if path.name.lower().endswith(PARTIAL_SUFFIXES):
            continue
        mtime = path.stat().st_mtime
        if moment - mtime < settle_s:
            continue
        found.append((mtime, path.name, path))
    return [p for _, _, p in sorted(found)]


def _free_name(target_dir: Path, name: str, sha256: str) -> Path:
    target = target_dir / name
    if target.exists():
        stem, dot, ext = name.partition(".")
        target = target_dir / f"{stem}-{sha256[:12]}{dot}{ext}"
    return target


def move_done(path: Path, sha256: str) -> Path:
    """Move an imported (or already imported) file into ``done/``."""
    target_dir = path.parent / DONE
    target_dir.mkdir(exist_ok=True)
    target = _free_name(target_dir, path.name, sha256)
    path.replace(target)
    return target


def move_refused(path: Path, sha256: str, why: str) -> Path:
    """Move a refused file into ``refused/`` with ``<name>.why.txt`` saying why."""
    target_dir = path.parent / REFUSED
    target_dir.mkdir(exist_ok=True)
    target = _free_name(target_dir, path.name, sha256)
    target.with_name(target.name + ".why.txt").write_text(why.rstrip() + "\n", encoding="utf-8")
    path.replace(target)
    return target
