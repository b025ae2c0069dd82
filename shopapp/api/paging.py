"""List pages of the API: ``page`` and ``size`` in, ``items`` and ``total`` out, counted
and cut in SQL by :func:`shopapp.core.pagination.paginate` (the pages' own pager)."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, TypeVar

from pydantic import BaseModel
from sqlalchemy import Select
from sqlalchemy.orm import Session

from shopapp.api.schemas import Page, PageQuery
from shopapp.core.pagination import paginate

M = TypeVar("M", bound=BaseModel)


def page_of(session: Session, stmt: Select[Any], query: PageQuery, model: type[M],
            convert: Callable[[Any], M] | None = None) -> Page[M]:
    """One page of ``stmt`` as ``Page[model]``.

    The pages' pager shows the last page for a number past it; a script that reads pages
    until one comes back empty must get that empty page instead, never the last one again.
    """
    page = paginate(session, stmt, page=query.page, per_page=query.size)
    make = convert or model.model_validate
    items = [make(row) for row in page.items] if page.number == query.page else []
    return Page[model](items=items, total=page.total,  # type: ignore[valid-type]
                       page=query.page, size=page.per_page, pages=page.pages)
