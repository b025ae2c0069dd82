"""Striking out a correction recorded by mistake (twice, say), as a run is struck out: it
stays listed, marked, and counts for nothing in the advice, the calculations and the
certificate. Figures by hand: two records of 10 g at 20° are 20 g at 20° on the rotor;
with one struck out, 10 g (vector sum, common shop practice, no source)."""

from __future__ import annotations

import html
import re
from typing import Any

import pytest
from sqlalchemy import select

from shopapp.certificates import issue as certificates
from shopapp.core.errors import PermissionDenied, TransitionRefused, ValidationFailed
from shopapp.jobs.advice import applied_vector_g
from shopapp.jobs.corrections import record_correction, strike_correction
from shopapp.jobs.states import mark_in_tolerance
from shopapp.models import AuditEvent, Correction, Job
from shopapp.reports.certificate import CertificateData
from tests.jobs.test_corrections_advice import R, _v, book, run, single_plane
from tests.reports.samples import job_ready_for_certificate


def text(resp: Any) -> str:
    return html.unescape(resp.get_data(as_text=True))


@pytest.fixture()
def machine(shop):  # type: ignore[no-untyped-def]
    return shop.machine(min_speed_rpm=100.0, max_speed_rpm=4000.0)


def _twice(db: Any, user: Any, job: Job, first: Any) -> tuple[Correction, Correction]:
    # The same weight recorded twice; the twin answers no run, as a second correction of
    # the plane answering the same run is refused (jobs.corrections.record_correction).
    kept, twin = (record_correction(db, job, by=user, run_id=ref, plane=1, action="add",
                                    mass_g=10.0, angle_deg=20.0, radius_mm=R)
                  for ref in (first.id, None))
    db.commit()
    return kept, twin


def test_a_struck_correction_counts_for_nothing_and_is_audited(db, shop, machine,
                                                                make_user) -> None:
    op = make_user("operator")
    job = book(db, op, single_plane(shop), machine)
    first = run(db, op, job, "initial", _v(5000.0, 200.0))
    _kept, twin = _twice(db, op, job, first)
    assert applied_vector_g(job.corrections, 1, R) == pytest.approx(_v(20.0, 20.0))
    with pytest.raises(ValidationFailed) as exc:
        strike_correction(db, job, twin, by=op, reason="  ")
    assert exc.value.field == "reason"
    for role in ("owner", "admin"):
        with pytest.raises(PermissionDenied):
            strike_correction(db, job, twin, by=make_user(role), reason="twice")
    strike_correction(db, job, twin, by=op, reason="recorded twice")
    assert twin.struck_by_id == op.id and twin.struck_reason == "recorded twice"
    assert twin in job.correction_log and twin not in job.corrections  # kept, never deleted
    assert applied_vector_g(job.corrections, 1, R) == pytest.approx(_v(10.0, 20.0))
    event = db.scalars(select(AuditEvent).where(AuditEvent.entity == "correction",
                                                AuditEvent.action == "strike_correction")).one()
    assert event.entity_id == twin.id and event.after["reason"] == "recorded twice"
    with pytest.raises(TransitionRefused, match="already struck"):
        strike_correction(db, job, twin, by=op, reason="again")


def test_a_weight_replaced_by_a_later_one_is_struck_only_after_it(db, shop, machine,
                                                                  make_user) -> None:
    op = make_user("operator")
    job = book(db, op, single_plane(shop), machine)
    first = run(db, op, job, "initial", _v(5000.0, 200.0))
    old = record_correction(db, job, by=op, run_id=first.id, plane=1, action="add",
                            mass_g=10.0, angle_deg=20.0, radius_mm=R)
    record_correction(db, job, by=op, run_id=first.id, plane=1, action="add", mass_g=12.0,
                      angle_deg=20.0, radius_mm=R, replaces_correction_id=old.id)
    with pytest.raises(TransitionRefused, match="strike that correction out first"):
        strike_correction(db, job, old, by=op, reason="mistake")


def test_corrections_of_a_job_in_tolerance_or_certified_cannot_be_struck(db, shop, make_user
                                                                          ) -> None:
    # As for runs: the evidence of a finished job is struck only after reopening it.
    op, quality = make_user("operator"), make_user("quality")
    job = job_ready_for_certificate(db, shop, op)
    corr = job.corrections[0]
    with pytest.raises(TransitionRefused, match="reopen it first"):
        strike_correction(db, job, corr, by=op, reason="late regret")
    certificates.issue(db, job, by=quality)
    with pytest.raises(TransitionRefused, match="reopen it first"):
        strike_correction(db, job, corr, by=quality, reason="late regret")


def test_a_struck_duplicate_is_left_off_the_certificate(db, shop, make_user) -> None:
    op, quality = make_user("operator"), make_user("quality")
    job = job_ready_for_certificate(db, shop, op, mark=False)
    # The sample job fits two corrections; the duplicate of the first is struck out.
    twin = record_correction(db, job, by=op, run_id=None, plane=1, action="add",
                             mass_g=30.0, angle_deg=210.0, radius_mm=300.0)
    strike_correction(db, job, twin, by=op, reason="recorded twice")
    mark_in_tolerance(db, job, by=op)
    cert = certificates.issue(db, job, by=quality)
    data = CertificateData.from_json(cert.data_json)
    assert [(c.plane, c.mass_g) for c in data.corrections] == [(1, 30.0), (2, 23.3)]


def test_job_page_strikes_a_correction_and_shows_it_struck(client, login_as, db, shop,
                                                           machine) -> None:
    user = login_as("operator", full_name="Otto Test")
    job = book(db, user, single_plane(shop), machine)
    first = run(db, user, job, "initial", _v(5000.0, 200.0))
    _kept, twin = _twice(db, user, job, first)
    page = text(client.get(f"/jobs/{job.id}"))
    assert f'action="/jobs/{job.id}/corrections/{twin.id}/strike"' in page
    resp = client.post(f"/jobs/{job.id}/corrections/{twin.id}/strike",
                       data={f"strike-c{twin.id}-reason": ""})
    assert resp.status_code == 422 and "Give the reason" in text(resp)
    db.expire_all()
    assert db.get(Correction, twin.id).struck_at is None
    resp = client.post(f"/jobs/{job.id}/corrections/{twin.id}/strike",
                       data={f"strike-c{twin.id}-reason": "recorded twice"})
    assert resp.status_code == 302
    page = text(client.get(f"/jobs/{job.id}"))
    row = re.search(rf'<tr class="struck" id="correction-{twin.id}">.*?</tr>', page, re.S)
    assert row and "struck out" in row.group(0) and "Otto Test" in row.group(0)
    assert "recorded twice — counts for nothing" in row.group(0)
    assert f'action="/jobs/{job.id}/corrections/{twin.id}/strike"' not in page
