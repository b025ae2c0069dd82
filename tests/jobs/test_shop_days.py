"""The shop's days: "today" and a moment's day are the shop's, not Greenwich's
(shopapp.core.clock).

Offsets from the IANA time zone database (read through Python's zoneinfo): Auckland keeps
NZDT, UTC+13, in December; Chicago keeps CST, UTC−6.
"""

from __future__ import annotations

import datetime as dt
import html
import re
from collections.abc import Callable, Iterator
from typing import Any

import pytest

from shopapp import create_app
from shopapp.core import clock, display
from shopapp.core.config import ConfigError
from shopapp.core.errors import ValidationFailed
from shopapp.jobs.intake import ToleranceSpec, book_in

# 09:00 on 5 December in Auckland; still 4 December in UTC.
AUCKLAND_MORNING = dt.datetime(2026, 12, 4, 20, 0, tzinfo=dt.UTC)
# 20:00 on 3 December in Chicago; already 4 December in UTC.
CHICAGO_EVENING = dt.datetime(2026, 12, 4, 2, 0, tzinfo=dt.UTC)


@pytest.fixture()
def shop_at(monkeypatch: pytest.MonkeyPatch) -> Iterator[Callable[[str, dt.datetime], None]]:
    def use(zone: str, utc_now: dt.datetime) -> None:
        clock.set_shop_zone(zone)
        monkeypatch.setattr(clock, "_utc_now", lambda: utc_now)

    yield use
    clock.set_shop_zone(None)


def _book(db: Any, shop: Any, make_user: Any, received_on: dt.date) -> Any:
    rtype = shop.rotor_type()
    machine = shop.machine(min_speed_rpm=100.0, reading_unit="g·mm")
    return book_in(db, by=make_user("operator"), customer=rtype.customer_id,
                   serial_number="TZ-1", rotor_type_id=rtype.id, balancing_speed_rpm=600.0,
                   machine_id=machine.id, tolerance=ToleranceSpec("grade", grade=6.3),
                   received_on=received_on)


def test_a_shop_east_of_greenwich_books_its_own_today_in_the_morning(db, shop, make_user,
                                                                     shop_at) -> None:
    shop_at("Pacific/Auckland", AUCKLAND_MORNING)
    assert clock.shop_today() == dt.date(2026, 12, 5)
    # Before: refused as "in the future (today is 2026-12-04)", the UTC day.
    job = _book(db, shop, make_user, dt.date(2026, 12, 5))
    assert job.received_on == dt.date(2026, 12, 5)
    with pytest.raises(ValidationFailed) as refused:
        _book(db, shop, make_user, dt.date(2026, 12, 6))
    assert "in the future (today is 2026-12-05)" in str(refused.value)


def test_a_shop_west_of_greenwich_sees_its_own_date_on_the_evening_form(client, login_as,
                                                                        shop_at) -> None:
    shop_at("America/Chicago", CHICAGO_EVENING)
    login_as("operator")
    page = html.unescape(client.get("/jobs/new").get_data(as_text=True))
    field = re.search(r'<input[^>]*name="received_on"[^>]*>', page)
    assert field is not None
    # Before: the server's clock date, here the UTC one (4 December), tomorrow for the shop.
    assert 'value="2026-12-03"' in field.group(0)


def test_a_moment_reads_as_the_shop_day(shop_at) -> None:
    shop_at("America/Chicago", CHICAGO_EVENING)
    taken = dt.datetime(2026, 12, 4, 1, 30, tzinfo=dt.UTC)  # 19:30 CST on 3 December
    assert clock.shop_date(taken) == dt.date(2026, 12, 3)
    assert display.date(taken) == "2026-12-03"
    shop_at("Pacific/Auckland", AUCKLAND_MORNING)
    assert clock.shop_date(taken) == dt.date(2026, 12, 4)  # 14:30 NZDT on 4 December


@pytest.mark.parametrize("name", ["Mars/Olympus_Mons", "Europe", "../../etc/passwd", "x" * 300,
                                  " ", "utc"])
def test_an_unknown_time_zone_stops_the_start_naming_the_setting(tmp_path, name) -> None:
    with pytest.raises(ConfigError) as refused:
        create_app({"TESTING": True, "SECRET_KEY": "x", "INSTANCE_PATH": str(tmp_path),
                    "DATABASE_URL": f"sqlite:///{tmp_path}/s.sqlite3", "TIME_ZONE": name})
    assert "TIME_ZONE" in str(refused.value) and "is not a known time zone" in str(refused.value)
    clock.set_shop_zone(None)


def test_the_settings_page_says_which_days_the_shop_counts(client, login_as, shop_at) -> None:
    shop_at("Pacific/Auckland", AUCKLAND_MORNING)
    login_as("admin")
    page = html.unescape(client.get("/admin/settings").get_data(as_text=True))
    days = re.search(r'<p id="shop-days">(.*?)</p>', page, re.S)
    assert days is not None
    assert "Pacific/Auckland" in days.group(1) and "2026-12-05 09:00" in days.group(1)
