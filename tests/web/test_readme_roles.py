"""The README's role table ("Who may do what") and the code's role table
(shopapp.core.permissions) say the same thing, so neither can drift alone.

Before this test the README gave arbors to quality and admin while the code let
operators and quality measure an arbor's error and refused admin."""

from __future__ import annotations

import re
from pathlib import Path

from shopapp.core.permissions import PERMISSIONS
from shopapp.models import ROLES

README = Path(__file__).resolve().parents[2] / "README.md"
_KEY = re.compile(r"\(`([a-z_]+)`\)\s*$")


def _readme_table() -> list[tuple[str, str, frozenset[str]]]:
    """(row text, action, roles ticked) for each row of the README's role table."""
    text = README.read_text(encoding="utf-8")
    section = text.split("### Who may do what", 1)[1]
    lines = [ln.strip() for ln in section.splitlines()]
    start = next(i for i, ln in enumerate(lines) if ln.startswith("| action"))
    header = [c.strip() for c in lines[start].strip("|").split("|")]
    assert header[1:] == list(ROLES), header
    rows = []
    for line in lines[start + 2:]:
        if not line.startswith("|"):
            break
        cells = [c.strip() for c in line.strip("|").split("|")]
        key = _KEY.search(cells[0])
        assert key, f"README role row without its action name in brackets: {cells[0]!r}"
        ticked = frozenset(role for role, cell in zip(ROLES, cells[1:], strict=True)
                           if cell == "✓")
        rows.append((cells[0], key.group(1), ticked))
    return rows


def test_every_readme_row_matches_the_code() -> None:
    wrong = [f"{text}: README {sorted(roles)}, code {sorted(PERMISSIONS.get(key, ()))}"
             for text, key, roles in _readme_table() if PERMISSIONS.get(key) != roles]
    assert not wrong, "\n".join(wrong)


def test_every_action_of_the_code_is_in_the_readme() -> None:
    assert {key for _text, key, _roles in _readme_table()} == set(PERMISSIONS)


def test_arbor_error_measurements_are_job_work_not_admin_work() -> None:
    """The decision this test was written for: operators measure arbors at the machine;
    admin (not a superuser) does not."""
    rows = {text: roles for text, _key, roles in _readme_table()}
    arbor_row = next(roles for text, roles in rows.items() if "arbor's error" in text)
    assert arbor_row == frozenset({"operator", "quality"})
