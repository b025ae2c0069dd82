"""What the registry's edit-page tests share."""

from __future__ import annotations

import re


def drawn_stamp(page: str) -> str:
    """The hidden record stamp (``drawn``) an edit form was drawn with."""
    found = re.search(r'name="drawn"[^>]*value="([^"]*)"', page) or re.search(
        r'value="([^"]*)"[^>]*name="drawn"', page)
    assert found is not None, page[:2000]
    return found.group(1)
