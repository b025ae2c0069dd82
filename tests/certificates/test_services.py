"""Certificates service: issue rules, immutability, reissue and void, verify, register, ZIP."""

from __future__ import annotations

import csv
import datetime as dt
import hashlib
import io
import math
import zipfile

import pypdf
import pytest
from sqlalchemy import update
from sqlalchemy.exc import DBAPIError

from shopapp.balancing import tolerance
from shopapp.balancing.phasors import phasor
from shopapp.certificates import issue as certificates
from shopapp.certificates import queries, register
from shopapp.core.errors import PermissionDenied, TransitionRefused, ValidationFailed
from shopapp.jobs.runs import record_run
from shopapp.jobs.states import mark_in_tolerance, reopen
from shopapp.models import AuditEvent, Certificate, MachineVerification
from shopapp.reports import certificate as report
from tests.reports.samples import RESIDUAL_GMM, job_ready_for_certificate


@pytest.fixture()
def people(make_user):  # type: ignore[no-untyped-def]
    return make_user("operator", full_name="Ola Operator"), make_user("quality",
                                                                       full_name="Quinn Quality")


def _pdf_text(pdf: bytes) -> str:
    return "\n".join(p.extract_text() for p in pypdf.PdfReader(io.BytesIO(pdf)).pages)


def _verify_on(db, machine, on: dt.date, passed: bool = True) -> None:  # type: ignore[no-untyped-def]
    db.add(MachineVerification(machine_id=machine.id, performed_on=on, proving_rotor="PR-1",
                               passed=passed))
    db.flush()


def test_issue_stores_pdf_data_and_hashes_and_certifies_the_job(db, shop, people) -> None:
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    cert = certificates.issue(db, job, by=quality)
    assert job.state == "certified"
    assert cert.number.startswith(f"BC-{cert.issued_at.year}-") and cert.revision == 1
    assert cert.pdf_sha256 == hashlib.sha256(cert.pdf).hexdigest()
    assert cert.data_sha256 == hashlib.sha256(cert.data_json.encode("utf-8")).hexdigest()
    # The stored data re-renders to the unsigned rendering, and the stored file starts with
    # it byte for byte (issue 15: the embedded data and, when signed, the signature follow
    # as one incremental update, so the whole stored file can no longer equal a rendering;
    # tests/certificates/test_signed_pdf.py checks that the signature covers all of it).
    unsigned = certificates.rerender(cert)
    assert cert.pdf[:len(unsigned)] == unsigned and len(cert.pdf) > len(unsigned)
    assert certificates.rerender(cert) == unsigned  # reproducible
    events = db.query(AuditEvent).filter_by(entity="certificate", entity_id=cert.id).all()
    assert [e.action for e in events] == ["issue"]
    text = _pdf_text(cert.pdf)
    assert cert.number in text and job.rotor.serial_number in text
    assert cert.data_sha256 in text.replace("\n", "")
    assert "no verification on file" in text  # the machine has no records yet


def test_limits_and_residuals_on_the_certificate_equal_the_core(db, shop, people) -> None:
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    data = certificates.certificate_data(certificates.issue(db, job, by=quality))
    rt = job.rotor.rotor_type
    # ISO 21940-11: U_per = 1000·G·m/Ω with Ω = 2πn/60 (the standard's formula).
    u_per = 1000.0 * 6.3 * rt.mass_kg / (2.0 * math.pi * job.service_speed_rpm / 60.0)
    assert data.u_per_gmm == pytest.approx(u_per, rel=1e-5)
    # The same judgement computed here directly with shopapp.balancing.
    geo = tolerance.rotor_geometry(rt.bearing_a_mm, rt.bearing_b_mm, rt.centre_of_mass_mm,
                                   rt.plane_1_mm, rt.plane_2_mm)
    tol = tolerance.iso_tolerance(6.3, rt.mass_kg, job.service_speed_rpm, geo)
    verdict = tolerance.judge_residual(phasor(*RESIDUAL_GMM[0]), phasor(*RESIDUAL_GMM[1]),
                                       tol, geo)
    # Only what decides carries a limit (ISO 21940-11 judges in the bearing planes); the
    # correction-plane residuals are stated without one (issue 11, one basis).
    expected = {p.plane: p for p in verdict.bearing_planes}
    printed = {lim.name: lim for lim in data.limits}
    assert set(printed) == set(expected)
    for name, lim in printed.items():
        assert lim.limit_gmm == pytest.approx(expected[name].limit_gmm, rel=1e-5)
        assert lim.residual_gmm == pytest.approx(expected[name].residual_gmm, rel=1e-5)
        assert lim.percent_of_limit == pytest.approx(100 * expected[name].ratio, rel=1e-5)
        assert lim.passed is expected[name].passed
    # Symmetric rotor (centre of mass mid-span): half of U_per per bearing (ISO allocation).
    assert printed["bearing A"].limit_gmm == pytest.approx(u_per / 2, rel=1e-5)
    text = _pdf_text(certificates.rerender(queries.by_number(db, data.number)))
    assert f"{printed['bearing A'].limit_gmm:.0f}" in text
    assert f"{printed['bearing A'].residual_gmm:.0f}" in text


def test_only_quality_issues(db, shop, people, make_user) -> None:
    operator, _quality = people
    job = job_ready_for_certificate(db, shop, operator)
    for role in ("operator", "owner", "admin"):
        with pytest.raises(PermissionDenied, match=f"a {role} may not issue certificates"):
            certificates.issue(db, job, by=make_user(role))
    assert job.state == "in_tolerance"


def test_job_not_in_tolerance_is_refused(db, shop, people) -> None:
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator, mark=False)
    with pytest.raises(TransitionRefused, match="is on machine: only a job in tolerance"):
        certificates.issue(db, job, by=quality)


def test_out_of_tolerance_last_check_is_refused(db, shop, people) -> None:
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator, residual=((2600.0, 75.0), (2600.0, 75.0)),
                                    mark=False)
    # The jobs service would never mark this job in tolerance; force the state to prove
    # the certificates service checks the verdict itself.
    job.state = "in_tolerance"
    db.flush()
    with pytest.raises(TransitionRefused, match=r"out of tolerance \(bearing A at 1\d\d % of its"):
        certificates.issue(db, job, by=quality)


def test_overdue_machine_verification_is_refused_with_since_and_who(db, shop, people) -> None:
    operator, quality = people
    machine = shop.machine(name="Bay 7", verification_interval_days=30)
    _verify_on(db, machine, dt.date(2020, 1, 1))
    job = job_ready_for_certificate(db, shop, operator, machine=machine)
    with pytest.raises(TransitionRefused) as exc:
        certificates.issue(db, job, by=quality)
    msg = exc.value.message
    # The one register rule (traceability): verified 2020-01-01 + 30 days = due 2020-01-31,
    # overdue from the day after; the message names the machine, the date and who clears it.
    assert 'Machine "Bay 7" is overdue for its proving test since 2020-02-01' in msg
    assert "due 2020-01-31, last passed test 2020-01-01" in msg
    assert "Only a quality manager can clear it" in msg
    assert job.state == "in_tolerance"


def test_failed_machine_verification_is_refused(db, shop, people) -> None:
    operator, quality = people
    machine = shop.machine(name="Bay 8")
    today = dt.datetime.now(dt.UTC).date()
    _verify_on(db, machine, today - dt.timedelta(days=3), passed=False)
    job = job_ready_for_certificate(db, shop, operator, machine=machine)
    with pytest.raises(TransitionRefused, match='"Bay 8" failed its proving test on'):
        certificates.issue(db, job, by=quality)


def test_current_verification_is_printed(db, shop, people) -> None:
    operator, quality = people
    machine = shop.machine(name="Bay 9")
    on = dt.datetime.now(dt.UTC).date() - dt.timedelta(days=10)
    _verify_on(db, machine, on)
    job = job_ready_for_certificate(db, shop, operator, machine=machine)
    cert = certificates.issue(db, job, by=quality)
    assert f"last verified {on.isoformat()}: passed" in _pdf_text(cert.pdf)


def test_issued_certificate_cannot_be_changed_through_the_orm(db, shop, people) -> None:
    operator, quality = people
    cert = certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    cert.data_json = cert.data_json.replace("Quinn", "Quentin")
    with pytest.raises(DBAPIError, match="immutable"):
        db.flush()
    db.rollback()


def test_void_is_the_one_change_allowed_and_only_once(db, shop, people) -> None:
    operator, quality = people
    cert = certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    certificates.void(db, cert, by=quality, reason="wrong customer order reference")
    assert cert.state == "void" and cert.voided_by_id == quality.id
    with pytest.raises(TransitionRefused, match="is already void"):
        certificates.void(db, cert, by=quality, reason="again, by mistake")
    with pytest.raises(DBAPIError, match="immutable"):
        db.execute(update(Certificate).where(Certificate.id == cert.id)
                   .values(void_reason="edited later"))
    db.rollback()


@pytest.mark.parametrize("reason", ["", "   ", "typo"])
def test_void_and_reissue_need_a_reason(db, shop, people, reason) -> None:  # type: ignore[no-untyped-def]
    operator, quality = people
    cert = certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    with pytest.raises(ValidationFailed, match="reason: is required"):
        certificates.void(db, cert, by=quality, reason=reason)
    with pytest.raises(ValidationFailed, match="reason: is required"):
        certificates.reissue(db, cert, by=quality, reason=reason)
    assert cert.state == "issued"


def test_reissue_makes_the_next_revision_and_voids_the_old(db, shop, people) -> None:
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    first = certificates.issue(db, job, by=quality)
    job.customer_order_ref = "PO-88412-A"
    second = certificates.reissue(db, first, by=quality, reason="order reference corrected")
    assert (second.number, second.revision) == (first.number, 2)
    assert first.state == "void" and first.void_reason == "superseded by revision 2"
    assert "PO-88412-A" in _pdf_text(second.pdf)
    assert "Reason: order reference corrected" in _pdf_text(second.pdf)
    with pytest.raises(TransitionRefused, match="is not the latest; reissue revision 2"):
        certificates.reissue(db, first, by=quality, reason="from the old one")


def test_reopen_voids_and_a_new_issue_is_the_next_revision(db, shop, people) -> None:
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    first = certificates.issue(db, job, by=quality)
    reopen(db, job, by=operator, reason="customer reports vibration at site")
    assert first.state == "void"
    assert first.void_reason == "job reopened: customer reports vibration at site"
    record_run(db, job, by=operator, purpose="check", speed_rpm=600.0,
               readings=[(1, 500.0, 70.0, "g·mm"), (2, 400.0, 300.0, "g·mm")])
    mark_in_tolerance(db, job, by=operator)
    again = certificates.issue(db, job, by=quality)
    assert (again.number, again.revision) == (first.number, 2)
    assert again.reason == ("issued again after the job was reopened (customer reports "
                            "vibration at site); revision 1 was voided")
    v = register.verify(db, first.data_sha256)
    assert v.status == "void"
    assert "job reopened: customer reports vibration at site" in v.message
    assert "A later revision (2) exists" in v.message


def test_voided_from_the_queue_then_issued_again_says_so(db, shop, people) -> None:
    # Before: revision 1 read "superseded by revision 2" on /verify, not its void reason,
    # and revision 2 printed "issued again after the job was reopened".
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    first = certificates.issue(db, job, by=quality)
    certificates.void(db, first, by=quality, reason="wrong customer order on it")
    again = certificates.issue(db, job, by=quality)
    assert again.revision == 2
    assert again.reason == "issued again after revision 1 was voided: wrong customer order on it"
    printed = " ".join(_pdf_text(again.pdf).split())  # the PDF wraps the sentence
    assert "Reason: issued again after revision 1 was voided: wrong customer order" in printed
    v = register.check(db, first.number, first.verification_code)
    assert v.status == "void" and v.void_reason == "wrong customer order on it"
    assert "superseded" not in v.message and "A later revision (2) exists" in v.message


def test_issue_twice_is_refused_naming_the_certificate(db, shop, people) -> None:
    # Two quality managers issuing at once: the second is told which certificate the first
    # issued (the walk found "Job ... is certified: only a job in tolerance can be
    # certified", true but silent about the certificate).
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    first = certificates.issue(db, job, by=quality)
    with pytest.raises(TransitionRefused,
                       match=f"already has certificate {first.number} revision 1"):
        certificates.issue(db, job, by=quality)


def test_numbers_count_up_within_the_year(db, shop, people) -> None:
    operator, quality = people
    a = certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    b = certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    seq = [int(c.number.rsplit("-", 1)[1]) for c in (a, b)]
    assert seq[1] == seq[0] + 1


def test_verify_valid_void_superseded_unknown(db, shop, people) -> None:
    operator, quality = people
    first = certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    # Issue 15: a number alone only says that it exists (no state, no lines); the state and
    # lines need the number with its verification code (or a hash).
    v = register.verify(db, first.number.lower())
    assert v.status == "exists" and v.revision is None and v.lines == ()
    v = register.check(db, first.number.lower(), first.verification_code.lower())
    assert v.status == "valid" and v.revision == 1
    assert dict(v.lines)["Certificate"] == f"{first.number} revision 1"
    second = certificates.reissue(db, first, by=quality, reason="serial number typo fixed")
    assert register.verify(db, first.pdf_sha256).status == "superseded"
    assert "superseded by revision 2" in register.verify(db, first.pdf_sha256).message
    assert register.check(db, first.number, second.verification_code).revision == 2
    assert register.check(db, first.number, first.verification_code).status == "superseded"
    certificates.void(db, second, by=quality, reason="rotor scrapped by the customer")
    v = register.verify(db, second.data_sha256.upper())
    assert v.status == "void" and v.void_reason == "rotor scrapped by the customer"
    assert "void since" in v.message
    assert register.verify(db, "BC-1999-99999").status == "unknown"
    assert register.verify(db, "0" * 64).status == "unknown"
    with pytest.raises(ValidationFailed, match="q: enter a certificate number"):
        register.verify(db, "  ")


def test_verify_file_flags_an_altered_copy(db, shop, people) -> None:
    operator, quality = people
    cert = certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    result, remark = register.verify_file(db, cert.pdf)
    assert result.status == "valid" and remark == ""
    result, remark = register.verify_file(db, cert.pdf + b"\n% re-saved")
    assert result.status == "unknown"
    assert f"calls itself {cert.number} revision 1" in remark


def test_register_search_filters(db, shop, people) -> None:
    operator, quality = people
    a = certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    b_job = job_ready_for_certificate(db, shop, operator)
    b = certificates.issue(db, b_job, by=quality)
    certificates.void(db, b, by=quality, reason="issued against the wrong job")
    f = register.RegisterFilter
    numbers = lambda flt: {c.number for c in register.search(db, flt).items}  # noqa: E731
    assert numbers(f(serial=b_job.rotor.serial_number.lower())) == {b.number}
    assert numbers(f(customer=b_job.customer.name.upper())) == {b.number}
    assert numbers(f(rotor_type=b_job.rotor.rotor_type.part_number)) == {b.number}
    assert numbers(f(state="void")) >= {b.number} and a.number not in numbers(f(state="void"))
    assert numbers(f(number=a.number[-5:])) >= {a.number}
    today = a.issued_at.date()
    assert {a.number, b.number} <= numbers(f(date_from=today, date_to=today))
    assert not numbers(f(date_to=today - dt.timedelta(days=1))) & {a.number, b.number}
    with pytest.raises(ValidationFailed, match="date_to"):
        register.search(db, f(date_from=today, date_to=today - dt.timedelta(days=1)))
    page = register.search(db, f(), per_page=1)
    assert page.total >= 2 and len(page.items) == 1


def test_audit_zip_index_matches_its_files(db, shop, people) -> None:
    operator, quality = people
    a = certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    b = certificates.reissue(db, a, by=quality, reason="drawing number corrected")
    day = a.issued_at.date()
    data = register.audit_zip(db, day, day)
    with zipfile.ZipFile(io.BytesIO(data)) as zf:
        rows = list(csv.DictReader(io.StringIO(zf.read("index.csv").decode("utf-8"))))
        names = set(zf.namelist()) - {"index.csv"}
        assert {r["file_name"] for r in rows} == names
        for r in rows:
            assert hashlib.sha256(zf.read(r["file_name"])).hexdigest() == r["pdf_sha256"]
    by_rev = {(r["number"], r["revision"]): r for r in rows}
    assert by_rev[(a.number, "1")]["state"] == "void"
    assert by_rev[(b.number, "2")]["state"] == "issued"
    assert list(rows[0]) == list(register.INDEX_COLUMNS)
    assert register.audit_zip(db, day, day) == data  # same range, same bytes


def test_audit_zip_refuses_more_than_the_cap(db, shop, people, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    operator, quality = people
    a = certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    monkeypatch.setattr(register, "MAX_ZIP_CERTIFICATES", 1)
    day = a.issued_at.date()
    with pytest.raises(ValidationFailed, match="one ZIP holds at most 1"):
        register.audit_zip(db, day, day)


def test_certification_queue_lists_jobs_waiting(db, shop, people) -> None:
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    queue, total = queries.certification_queue(db)
    assert job in queue and total >= 1
    certificates.issue(db, job, by=quality)
    queue, _ = queries.certification_queue(db)
    assert job not in queue


def test_stored_data_round_trips(db, shop, people) -> None:
    operator, quality = people
    cert = certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    data = certificates.certificate_data(cert)
    assert report.canonical_json(data) == cert.data_json
    assert data.machine_verification == "no verification on file"
    assert data.corrections[1].details.startswith("split: 12.0 g at position 1")


# --------------------------------------------------------------------------- historical issue


def _date_back(job, days: float) -> dt.datetime:  # type: ignore[no-untyped-def]
    """Move the job's runs and corrections ``days`` into the past; returns that moment."""
    at = (dt.datetime.now(dt.UTC) - dt.timedelta(days=days)).replace(microsecond=0)
    for r in job.runs:
        r.taken_at = at
    for c in job.corrections:
        c.applied_at = at
    return at


def test_a_historical_issue_judges_the_job_as_it_stood_then(db, shop, people) -> None:
    """issued_at: the runs made later do not count, and the transition carries that time."""
    from shopapp.models import Run, RunReading

    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    balanced = _date_back(job, 3)
    # A later check run far out of tolerance (the rotor was disturbed afterwards).
    late = Run(job=job, seq=3, purpose="check", speed_rpm=600.0, by_id=operator.id,
               taken_at=balanced + dt.timedelta(days=2))
    late.readings = [RunReading(plane=p, amplitude=5000.0, angle_deg=10.0, unit="g·mm")
                     for p in (1, 2)]
    db.add(late)
    db.flush()
    db.expire(job, ["runs"])
    with pytest.raises(TransitionRefused, match="out of tolerance"):
        certificates.issue(db, job, by=quality)  # judged now: the late run decides
    issued_at = balanced + dt.timedelta(hours=4)
    cert = certificates.issue(db, job, by=quality, issued_at=issued_at)
    assert cert.issued_at == issued_at and job.state == "certified"
    data = certificates.certificate_data(cert)
    assert data.final_run == 2 and data.issued_at == issued_at.isoformat()
    assert job.transitions[-1].to_state == "certified" and job.transitions[-1].at == issued_at
    event = db.query(AuditEvent).filter_by(entity="certificate", entity_id=cert.id).one()
    assert event.at == issued_at
    # Voided later, at a historical moment too; not before it was issued.
    with pytest.raises(ValidationFailed, match="voided_at"):
        certificates.void(db, cert, by=quality, reason="customer order cancelled",
                          voided_at=issued_at - dt.timedelta(hours=1))
    certificates.void(db, cert, by=quality, reason="customer order cancelled",
                      voided_at=issued_at + dt.timedelta(days=1))
    assert cert.voided_at == issued_at + dt.timedelta(days=1)


def test_a_future_or_naive_issue_time_is_refused(db, shop, people) -> None:
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    with pytest.raises(ValidationFailed, match="issued_at"):
        certificates.issue(db, job, by=quality,
                           issued_at=dt.datetime.now(dt.UTC) + dt.timedelta(days=1))
    with pytest.raises(ValidationFailed, match="issued_at"):
        certificates.issue(db, job, by=quality, issued_at=dt.datetime(2026, 1, 1))
    assert job.state == "in_tolerance"


def test_a_historical_issue_is_refused_before_the_job_was_balanced(db, shop, people) -> None:
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    balanced = _date_back(job, 3)
    with pytest.raises(TransitionRefused, match="no check or final run"):
        certificates.issue(db, job, by=quality, issued_at=balanced - dt.timedelta(days=1))
