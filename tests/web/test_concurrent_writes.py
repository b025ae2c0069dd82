"""Several people saving at once: no error, no lost row, gapless numbers.

Each test runs a real application on a fresh database of the suite's backend
(SQLite file or PostgreSQL), with threads that each log in through their own
client and post at the same moment (a barrier releases them together). What is
checked is what a busy shop would see: every request answered with a redirect
(no 500, no "database is locked"), every posted row stored once, and the
numbers the shop's auditor reads (run numbers within a job, job numbers)
without a gap. Common practice, no source: a work-order register has no gaps.
"""

from __future__ import annotations

import datetime as dt
import re
import threading
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest
from flask import Flask
from sqlalchemy import func, select

from shopapp import create_app
from shopapp.core.database import make_engine
from shopapp.models import Base, Certificate, Job, Run, User
from tests import factories
from tests.conftest import PASSWORD, ShopClient

WRITERS = 6
POSTS_EACH = 3


@pytest.fixture()
def live_app(fresh_database_url: str, tmp_path: Path) -> Iterator[Flask]:
    eng = make_engine(fresh_database_url)
    Base.metadata.create_all(eng)
    eng.dispose()
    app = create_app({"TESTING": True, "SECRET_KEY": "test-only-secret",
                      "DATABASE_URL": fresh_database_url, "INSTANCE_PATH": str(tmp_path)})
    app.test_client_class = ShopClient
    yield app
    app.extensions["shopapp.db"].dispose()


def _setup(app: Flask) -> tuple[list[str], int, int, int]:
    """Users, a rotor type, a machine and one booked job; returns names and ids."""
    from shopapp.jobs import intake as jobs

    with app.extensions["shopapp.db"].session() as db:
        users = [factories.user(db, username=f"op{i}", role="operator", password=PASSWORD)
                 for i in range(WRITERS)]
        shop = factories.ShopFactory(db)
        machine = shop.machine(min_speed_rpm=100.0, reading_unit="um")
        rtype = shop.rotor_type()
        db.flush()
        job = jobs.book_in(db, by=users[0], customer=rtype.customer_id, serial_number="S-1",
                           rotor_type_id=rtype.id, balancing_speed_rpm=600.0,
                           machine_id=machine.id, tolerance=jobs.ToleranceSpec("grade", grade=6.3),
                           received_on=dt.date.today())
        return [u.username for u in users], job.id, rtype.id, machine.id


def _together(app: Flask, names: list[str], work: Callable[[ShopClient, int], list[int]]
              ) -> list[int]:
    """Log each user in on its own client, then run ``work`` in all threads at once."""
    clients = []
    for name in names:
        c: ShopClient = app.test_client()  # type: ignore[assignment]
        c.refresh_csrf("/login")
        assert c.post("/login", data={"username": name, "password": PASSWORD}).status_code == 302
        c.refresh_csrf("/")
        clients.append(c)
    barrier = threading.Barrier(len(clients))
    statuses: list[int] = []
    lock = threading.Lock()
    errors: list[BaseException] = []

    def run(i: int) -> None:
        try:
            barrier.wait()
            got = work(clients[i], i)
            with lock:
                statuses.extend(got)
        except BaseException as exc:  # collected and re-raised in the main thread
            errors.append(exc)

    threads = [threading.Thread(target=run, args=(i,)) for i in range(len(clients))]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=120)
    assert not errors, errors
    return statuses


def test_runs_posted_at_once_on_one_job_are_all_stored_with_gapless_numbers(live_app) -> None:
    names, job_id, _rt, _m = _setup(live_app)

    def post_runs(c: ShopClient, i: int) -> list[int]:
        out = []
        for k in range(POSTS_EACH):
            resp = c.post(f"/jobs/{job_id}/runs", data={
                "run-purpose": "initial", "run-speed_rpm": "600", "run-unit": "um",
                "run-amplitude_1": f"{1 + i + k / 10:.1f}", "run-angle_1_deg": "10",
                "run-amplitude_2": "3", "run-angle_2_deg": "350"})
            out.append(resp.status_code)
        return out

    statuses = _together(live_app, names, post_runs)
    assert statuses == [302] * (WRITERS * POSTS_EACH)
    with live_app.extensions["shopapp.db"].session() as db:
        seqs = sorted(db.scalars(select(Run.seq).where(Run.job_id == job_id)))
    assert seqs == list(range(1, WRITERS * POSTS_EACH + 1))


def test_logins_at_once_all_succeed(live_app) -> None:
    names, *_ = _setup(live_app)

    def login_again(c: ShopClient, _i: int) -> list[int]:
        c.post("/logout")
        c.refresh_csrf("/login")
        name = names[_i]
        return [c.post("/login", data={"username": name, "password": PASSWORD}).status_code]

    assert _together(live_app, names, login_again) == [302] * WRITERS


def test_book_ins_at_once_get_distinct_gapless_job_numbers(live_app) -> None:
    names, first_job, rtype_id, machine_id = _setup(live_app)
    with live_app.extensions["shopapp.db"].session() as db:
        customer_id = db.scalar(select(Job.customer_id).where(Job.id == first_job))

    def book(c: ShopClient, i: int) -> list[int]:
        resp = c.post("/jobs/new", data={
            "customer_id": str(customer_id), "serial_number": f"C-{i}",
            "rotor_type_id": str(rtype_id), "machine_id": str(machine_id),
            "balancing_speed_rpm": "600", "tolerance_method": "grade", "tolerance_grade": "6.3",
            "received_on": dt.date.today().isoformat(), "one_off-kind": "other",
            "one_off-method_1": "add"})
        return [resp.status_code]

    statuses = _together(live_app, names, book)
    assert statuses == [302] * WRITERS, statuses
    with live_app.extensions["shopapp.db"].session() as db:
        numbers = list(db.scalars(select(Job.number)))
        assert db.scalar(select(func.count()).select_from(User)) == WRITERS
    seqs = sorted(int(re.search(r"(\d+)$", n).group(1)) for n in numbers)  # type: ignore[union-attr]
    assert seqs == list(range(1, WRITERS + 2))



def test_certificates_issued_at_once_get_distinct_gapless_numbers(live_app) -> None:
    from tests.reports.samples import job_ready_for_certificate

    with live_app.extensions["shopapp.db"].session() as db:
        operator = factories.user(db, username="op", role="operator", password=PASSWORD)
        quality = [factories.user(db, username=f"qm{i}", role="quality", password=PASSWORD)
                   for i in range(4)]
        shop = factories.ShopFactory(db)
        machine = shop.machine()
        job_ids = [job_ready_for_certificate(db, shop, operator, machine=machine).id
                   for _ in quality]
        names = [q.username for q in quality]

    def issue(c: ShopClient, i: int) -> list[int]:
        return [c.post(f"/certificates/issue/{job_ids[i]}", data={}).status_code]

    assert _together(live_app, names, issue) == [302] * len(names)
    with live_app.extensions["shopapp.db"].session() as db:
        numbers = sorted(db.scalars(select(Certificate.number)))
    assert [int(n.rsplit("-", 1)[1]) for n in numbers] == list(range(1, len(names) + 1))


def test_corrections_posted_at_once_on_one_plane_of_one_run_store_one(live_app) -> None:
    """Walk finding: two people recording the correction of the same plane for the same
    run at the same moment both got it saved, silently: the rotor seemed to carry two
    weights where one was fitted. One is stored; every other person is told why."""
    from shopapp.jobs.runs import record_run

    names, job_id, _rt, _m = _setup(live_app)
    with live_app.extensions["shopapp.db"].session() as db:
        job = db.get(Job, job_id)
        by = db.scalar(select(User).where(User.username == names[0]))
        assert job is not None and by is not None
        run_id = record_run(db, job, by=by, purpose="initial", speed_rpm=600,
                            readings=[(1, 40.0, 10.0, "um"), (2, 3.0, 350.0, "um")]).id
        db.commit()

    def post_correction(c: ShopClient, i: int) -> list[int]:
        resp = c.post(f"/jobs/{job_id}/corrections/1", data={
            "c1-run_id": str(run_id), "c1-action": "add", "c1-mass_g": f"{20 + i}",
            "c1-angle_deg": "30", "c1-radius_mm": "100"})
        if resp.status_code != 302:
            assert "already has a correction answering run 1" in resp.get_data(as_text=True)
        return [resp.status_code]

    statuses = _together(live_app, names, post_correction)
    assert sorted(statuses) == [302] + [422] * (WRITERS - 1), statuses
    from shopapp.models import Correction
    with live_app.extensions["shopapp.db"].session() as db:
        stored = db.scalars(select(Correction).where(Correction.job_id == job_id)).all()
    assert len(stored) == 1
