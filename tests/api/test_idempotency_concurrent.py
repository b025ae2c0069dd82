"""A retried run sent several times at the same moment (a flaky network, a script that
retries on a timer) is logged once: the others get the first answer or a 409.

A real application on a fresh database of the suite's backend; threads released together
by a barrier, as in tests/web/test_concurrent_writes.py.
"""

from __future__ import annotations

import datetime as dt
import threading
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from flask import Flask
from sqlalchemy import func, select

from shopapp import create_app
from shopapp.accounts import api_tokens
from shopapp.core.database import make_engine
from shopapp.models import Base, Run
from tests import factories
from tests.conftest import PASSWORD

SENDERS = 4


@pytest.fixture()
def live_app(fresh_database_url: str, tmp_path: Path) -> Iterator[Flask]:
    eng = make_engine(fresh_database_url)
    Base.metadata.create_all(eng)
    eng.dispose()
    app = create_app({"TESTING": True, "SECRET_KEY": "test-only-secret",
                      "DATABASE_URL": fresh_database_url, "INSTANCE_PATH": str(tmp_path)})
    yield app
    app.extensions["shopapp.db"].dispose()


def test_the_same_key_sent_at_once_logs_one_run(live_app: Flask) -> None:
    from shopapp.jobs import intake

    database = live_app.extensions["shopapp.db"]
    with database.session() as db:
        user = factories.user(db, username="op.api", role="operator", password=PASSWORD)
        shop = factories.ShopFactory(db)
        machine = shop.machine(min_speed_rpm=100.0, reading_unit="um")
        rtype = shop.rotor_type()
        db.flush()
        job = intake.book_in(db, by=user, customer=rtype.customer_id, serial_number="S-1",
                             rotor_type_id=rtype.id, balancing_speed_rpm=600.0,
                             machine_id=machine.id,
                             tolerance=intake.ToleranceSpec("grade", grade=6.3),
                             received_on=dt.date.today())
        secret = api_tokens.create_token(db, by=user, user=user, name="retry").secret
        job_id = job.id
    body = {"purpose": "initial", "speed_rpm": 600, "unit": "um",
            "readings": [{"plane": 1, "amplitude": 40.0, "angle_deg": 10.0},
                         {"plane": 2, "amplitude": 20.0, "angle_deg": 200.0}]}
    headers = {"Authorization": f"Bearer {secret}", "Idempotency-Key": "retry-0001"}
    barrier = threading.Barrier(SENDERS)
    answers: list[tuple[int, Any]] = []
    lock = threading.Lock()

    def send() -> None:
        client = live_app.test_client()
        barrier.wait()
        resp = client.post(f"/api/v1/jobs/{job_id}/runs", json=body, headers=headers)
        with lock:
            answers.append((resp.status_code, resp.get_json()))

    threads = [threading.Thread(target=send) for _ in range(SENDERS)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=60)
    assert len(answers) == SENDERS
    assert {status for status, _ in answers} <= {201, 409}, answers
    created = [b for status, b in answers if status == 201]
    assert created and all(b == created[0] for b in created)
    with database.session() as db:
        assert db.scalar(select(func.count()).select_from(Run)) == 1
