"""Pagination done in SQL: one COUNT and one LIMIT/OFFSET query per page."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Generic, TypeVar

from sqlalchemy import Select, func, select
from sqlalchemy.orm import Session

T = TypeVar("T")

MAX_PER_PAGE = 200


@dataclass
class Page(Generic[T]):
    items: list[T]
    total: int
    number: int
    per_page: int
    # Query-string arguments to keep when linking to other pages (filters).
    args: dict[str, Any] = field(default_factory=dict)

    @property
    def pages(self) -> int:
        return max(1, -(-self.total // self.per_page))

    @property
    def has_prev(self) -> bool:
        return self.number > 1

    @property
    def has_next(self) -> bool:
        return self.number < self.pages


def paginate(
    session: Session,
    stmt: Select[Any],
    *,
    page: int = 1,
    per_page: int = 25,
    args: dict[str, Any] | None = None,
    scalars: bool = True,
) -> Page[Any]:
    """Run ``stmt`` for one page. ``stmt`` must already be ordered (stable pages)."""
    per_page = max(1, min(int(per_page), MAX_PER_PAGE))
    total = session.scalar(select(func.count()).select_from(stmt.order_by(None).subquery())) or 0
    pages = max(1, -(-total // per_page))
    number = max(1, min(int(page), pages))
    paged = stmt.limit(per_page).offset((number - 1) * per_page)
    items = list(session.scalars(paged)) if scalars else list(session.execute(paged))
    clean = {k: v for k, v in (args or {}).items() if v not in (None, "") and k != "page"}
    return Page(items=items, total=total, number=number, per_page=per_page, args=clean)


def page_number(raw: str | None) -> int:
    """A page number from the query string; junk means page 1, never an error."""
    try:
        return max(1, int(raw or 1))
    except (TypeError, ValueError):
        return 1
