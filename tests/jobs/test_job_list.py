"""The job list's page query: ids first in index order, bounded count, pages past it.

Expected orders and counts come from the jobs the test makes, sorted in Python (newest
received first, then highest id) — not from the query under test.
"""

from __future__ import annotations

import datetime as dt

from shopapp.core.pagination import Page, paginate_ids
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


def test_pager_numbers_are_first_a_window_and_the_last_when_known() -> None:
    def links(number: int, total: int, more: bool = False, next_exists: bool = False):  # type: ignore[no-untyped-def]
        return Page(items=[], total=total, number=number, per_page=10, more=more,
                    next_exists=next_exists).links()

    assert links(1, 30) == [1, 2, 3]
    assert links(6, 200) == [1, None, 4, 5, 6, 7, 8, None, 20]
    assert links(19, 200) == [1, None, 17, 18, 19, 20]
    assert links(4, 200) == [1, 2, 3, 4, 5, 6, None, 20]
    # The count stopped at 50 rows (5 pages known): no last page, a gap says more follow.
    assert links(7, 50, more=True, next_exists=True) == [1, None, 5, 6, 7, 8, None]


def test_the_job_list_links_page_numbers(client, login_as, app, shop) -> None:  # type: ignore[no-untyped-def]
    # Before: only "previous" and "next"; page 5 of 8 could not reach 1, 3 or 8 directly.
    app.config["PAGE_SIZE"] = 2
    _jobs(shop, 15)
    login_as("operator")
    page = client.get("/jobs?page=5&q=LIST").get_data(as_text=True)
    assert '<strong aria-current="page">5</strong>' in page
    for n in (1, 3, 4, 6, 7, 8):
        assert f'aria-label="page {n}"' in page, n
    assert 'aria-label="page 2"' not in page
    assert "page=8&amp;q=LIST" in page or "q=LIST&amp;page=8" in page


def test_a_search_matching_more_rotors_than_the_id_list_holds_finds_them_all(
        db, shop, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    # Past the id-list limit the rotor arm is matched by subquery: same jobs, found
    # case-insensitively on either path (expected from the rows the test made).
    from shopapp.jobs import queries

    jobs = [shop.job(shop.rotor(serial_number=f"Wide-{i}"), received_on=dt.date(2026, 5, 1))
            for i in range(3)]
    expected = sorted((j.id for j in jobs), reverse=True)
    f, _ = JobFilter.from_args({"q": "wIDE-"})
    assert [j.id for j in job_page(db, f, page=1, per_page=25).items] == expected
    monkeypatch.setattr(queries, "_ID_LIST_LIMIT", 1)
    assert queries.text_matches(db, "wIDE-").rotor_ids is None
    assert [j.id for j in job_page(db, f, page=1, per_page=25).items] == expected


def test_a_search_takes_percent_and_underscore_as_typed(db, shop) -> None:  # type: ignore[no-untyped-def]
    literal = shop.job(shop.rotor(serial_number="AB%_9"), received_on=dt.date(2026, 6, 1))
    shop.job(shop.rotor(serial_number="ABxy9"), received_on=dt.date(2026, 6, 2))
    f, _ = JobFilter.from_args({"q": "ab%_"})
    assert [j.id for j in job_page(db, f, page=1, per_page=25).items] == [literal.id]
