"""A voided certificate blocks dispatch (issue 11, "States and certificates").

The rule is ours (docs/architecture.md, "Job states"; common shop practice, no
source: a rotor leaves with a valid certificate or not at all): voiding the only
valid certificate of a certified job sends the job back to ``in_tolerance``,
where it waits for the next revision; dispatch refuses a job without a valid
certificate.
"""

from __future__ import annotations

import pytest

from shopapp.certificates import issue as certificates
from shopapp.core.errors import TransitionRefused
from shopapp.jobs import certificate_link, states
from shopapp.models import Certificate, JobTransition
from tests.reports.samples import job_ready_for_certificate


@pytest.fixture()
def people(make_user):  # type: ignore[no-untyped-def]
    return make_user("operator", full_name="Ola Operator"), make_user("quality",
                                                                       full_name="Quinn Quality")


def test_voiding_the_only_certificate_returns_the_job_to_in_tolerance(db, shop, people) -> None:
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    first = certificates.issue(db, job, by=quality)
    certificates.void(db, first, by=quality, reason="wrong drawing revision printed")
    assert job.state == "in_tolerance"
    last = db.query(JobTransition).filter_by(job_id=job.id).order_by(JobTransition.id.desc()
                                                                     ).first()
    assert (last.from_state, last.to_state) == ("certified", "in_tolerance")
    assert "wrong drawing revision printed" in last.reason and first.number in last.reason
    with pytest.raises(TransitionRefused, match="in tolerance and cannot go to dispatched"):
        states.dispatch(db, job, by=operator)
    assert "dispatch" not in states.allowed_actions(job)
    # The next revision certifies it again, and then it may leave.
    second = certificates.issue(db, job, by=quality)
    assert (second.number, second.revision, job.state) == (first.number, 2, "certified")
    states.dispatch(db, job, by=operator)
    assert job.state == "dispatched"


def test_dispatch_refuses_a_certified_job_without_a_valid_certificate(db, shop, people) -> None:
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    cert = certificates.issue(db, job, by=quality)
    # The bare row change, without the state move the service makes: dispatch still refuses.
    certificate_link.void_certificate(db, cert, by=quality, reason="bare void for the test")
    assert job.state == "certified"
    with pytest.raises(TransitionRefused, match="no valid certificate"):
        states.dispatch(db, job, by=operator)
    assert job.state == "certified" and job.dispatched_on is None


def test_a_certified_job_is_not_marked_in_tolerance_by_hand(db, shop, people) -> None:
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    certificates.issue(db, job, by=quality)
    with pytest.raises(TransitionRefused, match="only when quality voids its certificate"):
        states.transition(db, job, "in_tolerance", by=operator)
    with pytest.raises(TransitionRefused):
        states.mark_in_tolerance(db, job, by=operator)
    assert job.state == "certified"
    assert "in_tolerance" not in states.allowed_actions(job)


def test_voiding_a_dispatched_jobs_certificate_keeps_it_dispatched(db, shop, people) -> None:
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    cert = certificates.issue(db, job, by=quality)
    states.dispatch(db, job, by=operator)
    certificates.void(db, cert, by=quality, reason="customer scrapped the rotor")
    assert job.state == "dispatched" and job.dispatched_on is not None


def test_void_page_then_job_page_offers_issue_not_dispatch(client, login_as, db, shop,
                                                            make_user) -> None:
    operator = make_user("operator", full_name="Ola Operator")
    job = job_ready_for_certificate(db, shop, operator)
    db.commit()
    login_as("quality")
    assert client.post(f"/certificates/issue/{job.id}").status_code == 302
    cert = db.query(Certificate).filter_by(job_id=job.id).one()
    page = client.get(f"/jobs/{job.id}").get_data(as_text=True)
    assert 'value="dispatch"' in page
    resp = client.post(f"/certificates/{cert.id}/void", data={"reason": "wrong order reference"})
    assert resp.status_code == 302
    db.expire_all()
    assert db.get(Certificate, cert.id).state == "void" and job.state == "in_tolerance"
    page = client.get(f"/jobs/{job.id}").get_data(as_text=True)
    assert 'value="dispatch"' not in page
    assert f'action="/certificates/issue/{job.id}"' in page
    client.post("/logout")
    login_as("operator")
    refused = client.post(f"/jobs/{job.id}/state", data={"action": "dispatch"})
    assert refused.status_code in (409, 422)
    assert "cannot go to dispatched" in refused.get_data(as_text=True)
    db.expire_all()
    assert job.state == "in_tolerance"


def test_a_historical_void_dates_the_state_change_then(db, shop, people) -> None:
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    cert = certificates.issue(db, job, by=quality)
    when = cert.issued_at  # a given past moment (not before the issue)
    certificates.void(db, cert, by=quality, reason="loaded from the paper register",
                      voided_at=when)
    last = db.query(JobTransition).filter_by(job_id=job.id).order_by(JobTransition.id.desc()
                                                                     ).first()
    assert last.to_state == "in_tolerance"
    assert last.at.replace(tzinfo=None) == when.replace(tzinfo=None)
