"""The job list's page query: ids first in index order, bounded count, pages past it.

Expected orders and counts come from the jobs the test makes, sorted in Python (newest
received first, then highest id) — not from the query under test.
"""

from __future__ import annotations

import datetime as dt

from shopapp.core.pagination import paginate_ids
from shopapp.jobs.queries import JobFilter, job_page
from shopapp.models import Job


def _jobs(shop, n: int) -> list[Job]:  # type: ignore[no-untyped-def]
    rotor = shop.rotor(serial_number="LIST 7")
    # Several jobs share a day, so the id decides their order.
    return [shop.job(rotor, received_on=dt.date(2026, 3, 1) + dt.timedelta(days=i // 3))
            for i in range(n)]


def test_pages_follow_newest_first_and_the_count_stops_at_its_limit(db, shop) -> None:  # type: ignore[no-untyped-def]
    made = _jobs(shop, 11)
    expected = [j.id for j in sorted(made, key=lambda j: (j.received_on, j.id), reverse=True)]
    from sqlalchemy import select

    ids_stmt = (select(Job.id).where(Job.id.in_(expected))
                .order_by(Job.received_on.desc(), Job.id.desc()))
    seen: list[int] = []
    for number in range(1, 5):
        page = paginate_ids(db, ids_stmt, lambda ids: ids, page=number, per_page=3,
                            count_limit=5)
        assert page.more and page.total == 5  # 11 jobs, counted up to 5
        assert page.has_next == (number < 4)
        seen += page.items
    assert seen == expected
    whole = paginate_ids(db, ids_stmt, lambda ids: ids, page=9, per_page=3, count_limit=50)
    assert not whole.more and whole.total == 11 and whole.number == 4  # clamped to the last


def test_job_page_searches_serials_customers_and_numbers_with_digits(db, shop) -> None:  # type: ignore[no-untyped-def]
    made = _jobs(shop, 4)
    other = shop.job(received_on=dt.date(2026, 4, 1))
    newest_first = [j.id for j in sorted(made, key=lambda j: (j.received_on, j.id),
                                         reverse=True)]

    def ids(**args: str) -> list[int]:
        f, _ = JobFilter.from_args(args)
        return [j.id for j in job_page(db, f, page=1, per_page=25).items]

    assert ids(q="list 7") == newest_first
    assert ids(q=other.customer.name.lower()) == [other.id]
    assert ids(q=other.number) == [other.id]
    # "T-" is the fixed part of every test job number: without a digit it is no search
    # by number, so it finds only serials or customers holding it.
    assert ids(q="T-") == []
