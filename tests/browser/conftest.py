"""A real browser against the real app: Debian's Chromium driven by Playwright.

``live_shop`` starts shopapp with werkzeug's threaded server on 127.0.0.1 (a free
port) on its own fresh SQLite database in the test's temp folder (schema by
``create_all``), seeded with one operator, a customer, a two-plane rotor type
and a balancing machine. ``page`` is a Chromium page started headless with the
flags this machine's closed network needs and an empty profile directory. Without
``/usr/bin/chromium`` the
tests are skipped, unless ``SHOPAPP_REQUIRE_BROWSER=1`` (CI), then they fail.
"""

from __future__ import annotations

import os
import threading
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy.orm import Session
from werkzeug.serving import make_server

from shopapp import create_app
from shopapp.core.database import make_engine
from shopapp.models import Base
from tests import factories

CHROMIUM = "/usr/bin/chromium"
PASSWORD = "browser-day-42"
CHROMIUM_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]


@dataclass(frozen=True)
class LiveShop:
    url: str
    username: str
    password: str
    customer: str
    rotor_type_id: int
    machine_id: int
    radius_mm: float
    other_rotor_type_id: int  # another customer's, never offered for this customer


def _require_browser() -> None:
    if Path(CHROMIUM).is_file() and os.access(CHROMIUM, os.X_OK):
        return
    message = f"{CHROMIUM} is missing: install Debian's chromium package to run browser tests"
    if os.environ.get("SHOPAPP_REQUIRE_BROWSER") == "1":
        pytest.fail(message + " (SHOPAPP_REQUIRE_BROWSER=1 demands them)")
    pytest.skip(message)


@pytest.fixture()
def live_shop(tmp_path: Path) -> Iterator[LiveShop]:
    _require_browser()
    url = f"sqlite:///{tmp_path / 'browser.sqlite3'}"
    engine = make_engine(url)
    Base.metadata.create_all(engine)
    with Session(engine) as sess:
        operator = factories.user(sess, username="otto.browser", role="operator",
                                  password=PASSWORD, full_name="Otto Browser")
        shop = factories.ShopFactory(sess)
        customer = shop.customer(name="Fernhollow Fan Works (fictional)")
        rt = shop.rotor_type(customer, part_number="FFW-IMP-120",
                             description="two-plane fan impeller", positions_1=None,
                             positions_2=None)
        machine = shop.machine(name="Bay 1 soft-bearing (test)", bearing_kind="soft",
                               reading_unit="um")
        other = shop.rotor_type(shop.customer(name="Brackenford Pumps (fictional)"),
                                part_number="BRK-77", description="pump impeller")
        sess.commit()
        live = (operator.username, customer.name, rt.id, machine.id, rt.radius_1_mm, other.id)
    engine.dispose()
    app = create_app({
        "SECRET_KEY": "browser-test-only",
        "DATABASE_URL": url,
        "INSTANCE_PATH": str(tmp_path / "instance"),
        "WTF_CSRF_ENABLED": True,
    })
    server = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, name="live-shop", daemon=True)
    thread.start()
    try:
        yield LiveShop(f"http://127.0.0.1:{server.server_port}", live[0], PASSWORD, live[1],
                       live[2], live[3], live[4], live[5])
    finally:
        server.shutdown()
        thread.join(timeout=10)
        server.server_close()
        app.extensions["shopapp.db"].dispose()


@pytest.fixture()
def page(tmp_path: Path) -> Iterator[Any]:
    _require_browser()
    from playwright.sync_api import sync_playwright

    profile = tmp_path / "chromium-profile"
    profile.mkdir()
    with sync_playwright() as p:
        # Playwright takes the empty profile directory as user_data_dir (it refuses a
        # --user-data-dir argument); the other flags keep Chromium off the network.
        context = p.chromium.launch_persistent_context(
            str(profile), executable_path=CHROMIUM, headless=True, args=CHROMIUM_ARGS,
            viewport={"width": 1280, "height": 1800},
        )
        try:
            pg = context.new_page()
            pg.set_default_timeout(15_000)
            yield pg
        finally:
            context.close()
