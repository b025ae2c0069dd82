"""Pagination done in SQL: one COUNT and one LIMIT/OFFSET query per page, or, for long
lists (:func:`paginate_ids`), a bounded count, the page's ids, then its rows."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, Generic, TypeVar

from sqlalchemy import Select, func, select
from sqlalchemy.orm import Session

T = TypeVar("T")

MAX_PER_PAGE = 200
# A long list counts its rows up to here and then says "more than": counting every row of
# a 100 000-job history on each page costs more than the page itself.
COUNT_LIMIT = 2_000


@dataclass
class Page(Generic[T]):
    items: list[T]
    total: int
    number: int
    per_page: int
    # Query-string arguments to keep when linking to other pages (filters).
    args: dict[str, Any] = field(default_factory=dict)
    # True when the count stopped at ``total`` (:data:`COUNT_LIMIT`) and there are more rows;
    # then ``next_exists`` says whether a page follows this one.
    more: bool = False
    next_exists: bool = False

    @property
    def pages(self) -> int:
        """The number of pages (when ``more``: those known, at least up to the next one)."""
        known = max(1, -(-self.total // self.per_page))
        if self.more:
            return max(known, self.number + (1 if self.next_exists else 0))
        return known

    def links(self, around: int = 2) -> list[int | None]:
        """The page numbers the pager shows: the first, ``around`` either side of this
        one and the last when it is known; None marks a gap (drawn "…"). When the count
        stopped (``more``) the list ends in a gap: the last page is not known."""
        last = self.pages
        shown = {1, *range(max(1, self.number - around), min(last, self.number + around) + 1)}
        if not self.more:
            shown.add(last)
        out: list[int | None] = []
        for n in sorted(shown):
            if out and n - (out[-1] or 0) > 1:
                out.append(None)
            out.append(n)
        if self.more:
            out.append(None)
        return out

    @property
    def has_prev(self) -> bool:
        return self.number > 1

    @property
    def has_next(self) -> bool:
        if self.more:
            return self.next_exists
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


def paginate_ids(
    session: Session,
    ids_stmt: Select[Any],
    load: Callable[[list[Any]], list[T]],
    *,
    page: int = 1,
    per_page: int = 25,
    args: dict[str, Any] | None = None,
    count_limit: int = COUNT_LIMIT,
) -> Page[T]:
    """One page of a long list: ``ids_stmt`` (ordered, selecting one id column) gives the
    page's ids from an index, ``load(ids)`` turns them into rows in that order.

    The count stops at ``count_limit`` (the page then says "more than"); page numbers past
    the counted ones stay reachable (the next page is known from one extra id).
    """
    per_page = max(1, min(int(per_page), MAX_PER_PAGE))
    bounded = ids_stmt.order_by(None).limit(count_limit + 1).subquery()
    counted = session.scalar(select(func.count()).select_from(bounded)) or 0
    more = counted > count_limit
    total = min(counted, count_limit)
    number = max(1, int(page))
    if not more:
        number = min(number, max(1, -(-total // per_page)))
    ids = list(session.scalars(ids_stmt.limit(per_page + 1).offset((number - 1) * per_page)))
    next_exists = len(ids) > per_page
    items = load(ids[:per_page]) if ids else []
    clean = {k: v for k, v in (args or {}).items() if v not in (None, "") and k != "page"}
    return Page(items=items, total=total, number=number, per_page=per_page, args=clean,
                more=more, next_exists=next_exists)
