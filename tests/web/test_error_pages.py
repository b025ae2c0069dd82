"""The error page never touches a failed session and keeps the security headers."""

from __future__ import annotations

from typing import Any

from sqlalchemy.exc import OperationalError

from shopapp.jobs import runs as jobs
from shopapp.models import Job


def _job(shop: Any) -> Job:
    return shop.job(machine_id=shop.machine(min_speed_rpm=100.0).id)


def _post_run(client: Any, job: Job) -> Any:
    return client.post(f"/jobs/{job.id}/runs", data={
        "run-purpose": "initial", "run-speed_rpm": "600", "run-unit": "um",
        "run-amplitude_1": "4", "run-angle_1_deg": "10", "run-amplitude_2": "3",
        "run-angle_2_deg": "350"})


def test_a_failed_flush_gives_the_plain_500_page_with_headers(client, login_as, db, shop,
                                                             monkeypatch) -> None:
    login_as("operator")
    job = _job(shop)
    db.commit()

    def broken_flush(session: Any, *_a: Any, **_k: Any) -> None:
        session.add(Job())  # NOT NULL columns missing: the flush fails, the session is broken
        session.flush()

    monkeypatch.setattr(jobs, "record_run", broken_flush)
    resp = _post_run(client, job)
    assert resp.status_code == 500
    assert resp.mimetype == "text/html"
    assert "Something went wrong" in resp.get_data(as_text=True)
    assert resp.headers["Content-Security-Policy"] and resp.headers["X-Frame-Options"] == "DENY"


def test_a_lock_wait_that_ran_out_is_a_503_saying_nothing_was_saved(client, login_as, db, shop,
                                                                    monkeypatch) -> None:
    login_as("operator")
    job = _job(shop)
    db.commit()

    def locked(*_a: Any, **_k: Any) -> None:
        raise OperationalError("INSERT INTO run ...", {}, Exception("database is locked"))

    monkeypatch.setattr(jobs, "record_run", locked)
    resp = _post_run(client, job)
    assert resp.status_code == 503
    assert resp.headers["Retry-After"] == "2"
    assert "Nothing was saved" in resp.get_data(as_text=True)
