"""A create form posted twice (back button, double click) saves once.

The page issues a one-time token with each create form; the save spends it in
its own transaction; the same form posted again writes nothing, says "this form
was already saved" and leads to what the first post saved. Common practice, no
source: the "post once" token of web forms (a request carrying an already-used
idempotency key is answered, not repeated).
"""

from __future__ import annotations

import datetime as dt
import re
import threading
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from flask import Flask
from sqlalchemy import func, select

from shopapp import create_app
from shopapp.core.database import make_engine
from shopapp.models import Base, Correction, Customer, Job, Run, SubmissionToken
from tests import factories
from tests.conftest import PASSWORD, ShopClient

RUN = {"run-purpose": "initial", "run-speed_rpm": "600", "run-unit": "um",
       "run-amplitude_1": "12.5", "run-angle_1_deg": "10",
       "run-amplitude_2": "3", "run-angle_2_deg": "350"}


def _token(html: str, name: str) -> str:
    """The value of the hidden input ``name`` the page drew (what a browser sends back)."""
    m = re.search(rf'name="{re.escape(name)}"[^>]*value="([^"]+)"', html) or re.search(
        rf'value="([^"]+)"[^>]*name="{re.escape(name)}"', html)
    assert m, f"the page has no {name} field"
    return m.group(1)


def _count(db: Any, model: Any, *where: Any) -> int:
    return int(db.scalar(select(func.count()).select_from(model).where(*where)))


@pytest.fixture()
def job(db, shop) -> Job:  # type: ignore[no-untyped-def]
    machine = shop.machine(min_speed_rpm=100.0, reading_unit="um")
    j = shop.job(machine=machine, balancing_speed_rpm=600.0)
    db.commit()
    return j


def test_run_form_posted_twice_stores_one_run_and_says_so(client, login_as, db, job) -> None:
    login_as("operator")
    page = client.get(f"/jobs/{job.id}").get_data(as_text=True)
    data = {**RUN, "run-form_token": _token(page, "run-form_token")}

    first = client.post(f"/jobs/{job.id}/runs", data=data)
    again = client.post(f"/jobs/{job.id}/runs", data=data)

    assert first.status_code == 302
    assert again.status_code == 303
    assert again.headers["Location"].endswith(f"/jobs/{job.id}#runs")
    assert _count(db, Run, Run.job_id == job.id) == 1
    shown = client.get(again.headers["Location"]).get_data(as_text=True)
    assert "This form was already saved" in shown


def test_a_fresh_form_after_the_first_save_saves_again(client, login_as, db, job) -> None:
    """The token is per drawn form: reloading the page gives a new form that saves."""
    login_as("operator")
    for _ in range(2):
        page = client.get(f"/jobs/{job.id}").get_data(as_text=True)
        resp = client.post(f"/jobs/{job.id}/runs",
                           data={**RUN, "run-form_token": _token(page, "run-form_token")})
        assert resp.status_code == 302
    assert _count(db, Run, Run.job_id == job.id) == 2


def test_refused_run_keeps_its_token_for_the_corrected_post(client, login_as, db, job) -> None:
    """A refusal rolls back: the token is not spent, the corrected form saves."""
    login_as("operator")
    page = client.get(f"/jobs/{job.id}").get_data(as_text=True)
    token = _token(page, "run-form_token")
    bad = client.post(f"/jobs/{job.id}/runs",
                      data={**RUN, "run-amplitude_1": "abc", "run-form_token": token})
    assert bad.status_code == 422
    assert f'value="{token}"' in bad.get_data(as_text=True)  # the re-drawn form keeps it
    assert client.post(f"/jobs/{job.id}/runs",
                       data={**RUN, "run-form_token": token}).status_code == 302
    assert _count(db, Run, Run.job_id == job.id) == 1
    assert _count(db, SubmissionToken, SubmissionToken.token == token) == 1


def test_correction_posted_twice_stores_one_correction(client, login_as, db, job) -> None:
    login_as("operator")
    client.post(f"/jobs/{job.id}/runs", data=RUN)
    page = client.get(f"/jobs/{job.id}").get_data(as_text=True)
    data = {"c1-action": "add", "c1-mass_g": "4.2", "c1-angle_deg": "190",
            "c1-radius_mm": "150", "c1-form_token": _token(page, "c1-form_token")}
    assert client.post(f"/jobs/{job.id}/corrections/1", data=data).status_code == 302
    again = client.post(f"/jobs/{job.id}/corrections/1", data=data)
    assert again.status_code == 303
    assert _count(db, Correction, Correction.job_id == job.id) == 1


def test_book_in_posted_twice_opens_one_job_and_leads_to_it(client, login_as, db, shop) -> None:
    login_as("operator")
    machine = shop.machine(min_speed_rpm=100.0, reading_unit="um")
    rtype = shop.rotor_type()
    db.commit()
    page = client.get("/jobs/new").get_data(as_text=True)
    data = {"customer_id": str(rtype.customer_id), "serial_number": "DS-1",
            "rotor_type_id": str(rtype.id), "machine_id": str(machine.id),
            "balancing_speed_rpm": "600", "tolerance_method": "grade", "tolerance_grade": "6.3",
            "received_on": dt.date.today().isoformat(), "form_token": _token(page, "form_token")}
    first = client.post("/jobs/new", data=data)
    assert first.status_code == 302, first.get_data(as_text=True)[:2000]
    again = client.post("/jobs/new", data=data)
    assert again.status_code == 303
    assert again.headers["Location"] == first.headers["Location"]
    assert _count(db, Job) == 1


def test_registry_create_posted_twice_makes_one_customer(client, login_as, db) -> None:
    login_as("operator")
    page = client.get("/customers/new").get_data(as_text=True)
    data = {"name": "Twice Fans Ltd", "form_token": _token(page, "form_token")}
    first = client.post("/customers/new", data=data)
    again = client.post("/customers/new", data=data)
    assert (first.status_code, again.status_code) == (302, 303)
    assert again.headers["Location"] == first.headers["Location"]
    assert _count(db, Customer, Customer.name == "Twice Fans Ltd") == 1


@pytest.mark.parametrize("token", [None, "", "short", "x" * 81, "bad token with spaces!"])
def test_create_form_without_a_valid_token_is_refused_and_saves_nothing(
        client, login_as, db, job, token) -> None:
    login_as("operator")
    data = dict(RUN) if token is None else {**RUN, "run-form_token": token}
    resp = client.post(f"/jobs/{job.id}/runs", data=data, form_token=False)
    assert resp.status_code == 400
    assert "form_token" in resp.get_data(as_text=True)
    assert _count(db, Run, Run.job_id == job.id) == 0


# --------------------------------------------------------------------------- at the same moment


@pytest.fixture()
def live_app(fresh_database_url: str, tmp_path: Path) -> Iterator[Flask]:
    """A real app on a fresh database (commits are real, so two threads can race)."""
    eng = make_engine(fresh_database_url)
    Base.metadata.create_all(eng)
    eng.dispose()
    app = create_app({"TESTING": True, "SECRET_KEY": "test-only-secret",
                      "DATABASE_URL": fresh_database_url, "INSTANCE_PATH": str(tmp_path)})
    app.test_client_class = ShopClient
    yield app
    app.extensions["shopapp.db"].dispose()


@pytest.mark.parametrize("twins", [2, 4])
def test_same_form_posted_at_the_same_moment_is_stored_exactly_once(live_app, twins) -> None:
    with live_app.extensions["shopapp.db"].session() as db:
        factories.user(db, username="op", role="operator", password=PASSWORD)
        shop = factories.ShopFactory(db)
        machine = shop.machine(min_speed_rpm=100.0, reading_unit="um")
        job_id = shop.job(machine=machine, balancing_speed_rpm=600.0).id
        db.commit()
    c: ShopClient = live_app.test_client()  # type: ignore[assignment]
    c.refresh_csrf("/login")
    assert c.post("/login", data={"username": "op", "password": PASSWORD}).status_code == 302
    page = c.get(f"/jobs/{job_id}").get_data(as_text=True)
    data = {**RUN, "csrf_token": _token(page, "csrf_token"),
            "run-form_token": _token(page, "run-form_token")}
    # One client per twin sharing the login cookie: the browser's double click.
    clients = []
    for _ in range(twins):
        twin: ShopClient = live_app.test_client()  # type: ignore[assignment]
        twin.set_cookie("session", c.get_cookie("session").value)  # type: ignore[union-attr]
        clients.append(twin)
    barrier = threading.Barrier(twins)
    statuses: list[int] = []
    errors: list[BaseException] = []

    def post(k: int) -> None:
        try:
            barrier.wait()
            statuses.append(clients[k].post(f"/jobs/{job_id}/runs", data=data).status_code)
        except BaseException as exc:  # re-raised in the main thread
            errors.append(exc)

    threads = [threading.Thread(target=post, args=(k,)) for k in range(twins)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=120)
    assert not errors, errors
    assert sorted(statuses) == [302] + [303] * (twins - 1)
    with live_app.extensions["shopapp.db"].session() as db:
        assert _count(db, Run, Run.job_id == job_id) == 1
        assert _count(db, SubmissionToken) == 1
