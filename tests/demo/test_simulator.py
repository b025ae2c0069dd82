"""The demo shop generator: consistent history, physics the core agrees with, refusals.

The balancing checks recompute everything from the *stored* rows with the
balancing core directly (influence coefficients, least-squares unbalance,
ISO 21940-11 / 4W/N / customer tolerances and the residual verdict), not with
the generator's own bookkeeping, and also ask the app's job evaluation
(:func:`shopapp.jobs.calc.evaluate`) for its verdict.
"""

from __future__ import annotations

import datetime as dt
import gc
import hashlib
import itertools
import random
import re
from collections import Counter
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from sqlalchemy import Connection, Engine, func, select
from sqlalchemy.orm import Session, selectinload

from shopapp.accounts.users import check_password
from shopapp.balancing import influence, tolerance
from shopapp.balancing.phasors import normalize_deg, phasor
from shopapp.demo import bulk, days
from shopapp.demo import loader as demo
from shopapp.demo import scenario as demo_scenario
from shopapp.jobs import evidence as jt
from shopapp.jobs import residual_tests
from shopapp.jobs.queries import evaluate
from shopapp.jobs.states import ALLOWED, REOPEN_FROM
from shopapp.models import (
    Arbor,
    ArborErrorMeasurement,
    ArborErrorSubtraction,
    AuditEvent,
    Certificate,
    Correction,
    Customer,
    InfluenceSet,
    Job,
    JobTransition,
    Machine,
    MachineVerification,
    ProvingRotor,
    ResidualTest,
    Rotor,
    RotorType,
    Run,
    RunUpRecord,
    User,
)
from shopapp.registry import rotor_types
from shopapp.resonance.runups import analyse_run_up
from shopapp.traceability import services as tr

END = dt.date(2026, 3, 27)  # a Friday
SEED = 7


BASE_URL = "https://demo-shop.example.test"


@pytest.fixture(scope="module")
def signing_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The demo's instance signing folder (empty: the load makes the key)."""
    return tmp_path_factory.mktemp("instance") / "signing"


@pytest.fixture(scope="module")
def demo_conn(engine: Engine, signing_dir: Path
              ) -> Iterator[tuple[Connection, list[tuple[str, str, str]]]]:
    """One demo load for the whole module, on a transaction rolled back at the end."""
    conn = engine.connect()
    outer = conn.begin()
    sess = Session(bind=conn, join_transaction_mode="create_savepoint")
    logins = demo.load_demo(sess, seed=SEED, years=0.5, jobs_per_year=360, end_date=END,
                            signing_dir=signing_dir, base_url=BASE_URL)
    sess.commit()
    sess.close()
    yield conn, logins
    outer.rollback()
    conn.close()


@pytest.fixture()
def ds(demo_conn: tuple[Connection, Any]) -> Iterator[Session]:
    sess = Session(bind=demo_conn[0], join_transaction_mode="create_savepoint")
    yield sess
    sess.rollback()
    sess.close()


def _jobs(ds: Session) -> list[Job]:
    return list(ds.scalars(
        select(Job).options(selectinload(Job.runs).selectinload(Run.readings),
                            selectinload(Job.corrections), selectinload(Job.transitions))
        .order_by(Job.id)))


def _phasors(run: Run) -> list[complex]:
    return [phasor(r.amplitude, r.angle_deg) for r in sorted(run.readings, key=lambda r: r.plane)]


def _seen(ds: Session, job: Job, run: Run) -> list[complex]:
    """The run's readings less the arbor error the job subtracts (index balancing)."""
    v = _phasors(run)
    sub = ds.scalars(select(ArborErrorSubtraction)
                     .where(ArborErrorSubtraction.job_id == job.id)).first()
    if sub is None:
        return v
    m = sub.measurement
    err = [phasor(m.error_1_gmm, m.error_1_angle_deg), phasor(m.error_2_gmm, m.error_2_angle_deg)]
    return [x - e for x, e in zip(v, err, strict=True)]


def _coefficients(ds: Session, job: Job) -> np.ndarray | None:
    """A for the job, from the core: its own trials, the stored set it could use, or None (g·mm)."""
    runs = sorted(job.runs, key=lambda r: r.seq)
    rt = job.rotor.rotor_type
    trials = [r for r in runs if r.purpose == "trial"]
    if trials:
        v0 = _phasors(runs[0])
        ic = influence.influence_coefficients(
            v0, [influence.TrialRun(t.trial_plane, t.trial_mass_g * t.trial_radius_mm
                                    / (rt.radius_1_mm if t.trial_plane == 1 else rt.radius_2_mm),
                                    t.trial_angle_deg, tuple(_phasors(t))) for t in trials])
        return ic.matrix()
    if runs[0].readings[0].unit == "g·mm":
        return None
    if job.influence_set_id is not None:  # the set its corrections came from
        chosen = ds.get(InfluenceSet, job.influence_set_id)
        assert chosen is not None and chosen.learned_at < runs[0].taken_at, job.number
    else:  # the newest set learned before its initial run
        sets = list(ds.scalars(select(InfluenceSet).where(
            InfluenceSet.rotor_type_id == rt.id, InfluenceSet.machine_id == job.machine_id,
            InfluenceSet.learned_at < runs[0].taken_at)
            .order_by(InfluenceSet.learned_at.desc(), InfluenceSet.id.desc())))
        if not sets:
            return None
        chosen = sets[0]
    return np.array([complex(re, im) for re, im in chosen.coefficients]).reshape(2, 2)


def _unbalance_gmm(a: np.ndarray | None, v: list[complex], radii: tuple[float, float]
                   ) -> list[complex]:
    if a is None:
        return v  # a calibrated machine reads g·mm per correction plane
    u = np.linalg.solve(a, np.array(v))
    return [complex(u[0]) * radii[0], complex(u[1]) * radii[1]]


def _tolerance(job: Job) -> tuple[tolerance.Tolerance, tolerance.RotorGeometry]:
    """The job's tolerance straight from the core (ISO 21940-11, 4W/N or customer)."""
    rt = job.rotor.rotor_type
    geo = tolerance.rotor_geometry(rt.bearing_a_mm, rt.bearing_b_mm, rt.centre_of_mass_mm,
                                   rt.plane_1_mm, rt.plane_2_mm)
    if job.tolerance_method == "grade":
        return tolerance.iso_tolerance(job.tolerance_grade, rt.mass_kg, job.service_speed_rpm,
                                       geo), geo
    if job.tolerance_method == "4w/n":
        return tolerance.api_tolerance(job.journal_load_a_kg, job.service_speed_rpm,
                                       job.journal_load_b_kg, rt.mass_kg), geo
    return tolerance.customer_tolerance(job.explicit_limit_1_gmm, job.explicit_limit_2_gmm), geo


def _passes(ds: Session, job: Job, a: np.ndarray | None, run: Run) -> bool:
    rt = job.rotor.rotor_type
    u = _unbalance_gmm(a, _seen(ds, job, run), (rt.radius_1_mm, rt.radius_2_mm))
    tol, geo = _tolerance(job)
    return tolerance.judge_residual(u[0], u[1], tol, geo).passed


# --------------------------------------------------------------------------- the shop


def test_logins_one_account_per_person_with_working_passwords(
    demo_conn: tuple[Connection, list[tuple[str, str, str]]], ds: Session
) -> None:
    logins = demo_conn[1]
    assert Counter(role for role, _u, _p in logins) == Counter(
        {"operator": 3, "quality": 1, "owner": 1, "admin": 1})
    for _role, username, password in logins:
        user = ds.scalars(select(User).where(User.username == username)).one()
        assert check_password(user, password)


def test_history_has_every_kind_of_job(ds: Session) -> None:
    jobs = _jobs(ds)
    states = Counter(j.state for j in jobs)
    assert len(jobs) >= 150
    assert states["dispatched"] > 0.8 * len(jobs)
    assert states["rejected"] >= 2
    # Still in the shop at the end date: waiting, on the machine or awaiting dispatch.
    assert sum(states[s] for s in ("booked_in", "on_machine", "in_tolerance", "certified")) >= 3
    assert sum(1 for j in jobs if j.kind == "return") >= 1
    assert sum(1 for j in jobs if j.reopen_count > 0) >= 3
    cycles = Counter(len({c.run_id for c in j.corrections}) for j in jobs if j.corrections)
    assert cycles[1] > 0 and sum(n for k, n in cycles.items() if k >= 2) >= 5


def test_returns_link_to_an_earlier_dispatched_job_of_the_same_rotor(ds: Session) -> None:
    returns = [j for j in _jobs(ds) if j.kind == "return"]
    assert returns
    for j in returns:
        earlier = ds.get(Job, j.return_of_job_id)
        assert earlier is not None and earlier.kind == "new"
        assert earlier.rotor_id == j.rotor_id and earlier.customer_id == j.customer_id
        assert earlier.state == "dispatched" and earlier.dispatched_on is not None
        assert j.received_on >= earlier.dispatched_on
        assert j.transitions[0].reason == "customer return"


def test_rejected_and_reopened_jobs_carry_their_reasons(ds: Session) -> None:
    jobs = _jobs(ds)
    for j in jobs:
        if j.state == "rejected":
            assert len(j.reject_reason) > 10
            assert j.transitions[-1].to_state == "rejected"
            assert j.transitions[-1].reason == j.reject_reason
        reopens = [t for t in j.transitions
                   if t.to_state == "on_machine" and t.from_state in REOPEN_FROM]
        assert len(reopens) == j.reopen_count
        assert all(len(t.reason) > 10 for t in reopens)


def test_every_state_change_is_a_transition_the_state_machine_allows(ds: Session) -> None:
    for j in _jobs(ds):
        trs = sorted(j.transitions, key=lambda t: (t.at, t.id))
        assert trs[0].from_state is None and trs[0].to_state == "booked_in"
        for prev, nxt in itertools.pairwise(trs):
            assert nxt.from_state == prev.to_state, j.number
            assert nxt.to_state in ALLOWED[prev.to_state], j.number
            assert nxt.at >= prev.at
        assert trs[-1].to_state == j.state
        if j.first_in_tolerance_at is not None:
            first = next(t for t in trs if t.to_state == "in_tolerance")
            assert first.at == j.first_in_tolerance_at


def test_every_action_has_an_audit_event(ds: Session) -> None:
    # Job events that are state changes (others on a job: its arbor, the set it used).
    transitions = ("book_in", "start", "in_tolerance", "certified", "dispatch", "reject",
                   "reopen")
    n = {
        ("job", transitions): ds.scalar(select(func.count()).select_from(JobTransition)),
        ("run", None): ds.scalar(select(func.count()).select_from(Run)),
        ("correction", None): ds.scalar(select(func.count()).select_from(Correction)),
        ("residual_test", None): ds.scalar(select(func.count()).select_from(ResidualTest)),
        ("job", ("use_influence_set",)): ds.scalar(
            select(func.count()).select_from(Job).where(Job.influence_set_id.is_not(None))),
        ("job", ("set_arbor",)): ds.scalar(
            select(func.count()).select_from(Job).where(Job.arbor_id.is_not(None))),
    }
    for (entity, actions), count in n.items():
        q = select(func.count()).select_from(AuditEvent).where(
            AuditEvent.entity == entity, AuditEvent.job_id.is_not(None))
        if actions is not None:
            q = q.where(AuditEvent.action.in_(actions))
        assert ds.scalar(q) == count, (entity, actions)


def test_dates_are_working_days_in_a_sensible_order(ds: Session) -> None:
    for j in _jobs(ds):
        assert j.received_on.weekday() < 5
        assert j.promised_on is not None and j.promised_on > j.received_on
        assert j.received_on <= END
        if j.dispatched_on is not None:
            assert j.dispatched_on.weekday() < 5 and j.received_on <= j.dispatched_on <= END
        for r in j.runs:
            assert r.taken_at.date() >= j.received_on and r.taken_at.date() <= END


# --------------------------------------------------------------------------- physics


def test_dispatched_jobs_pass_by_an_independent_recompute(ds: Session) -> None:
    """The last check run of every dispatched job is within tolerance (core, from stored rows)."""
    checked = 0
    for j in _jobs(ds):
        if j.state != "dispatched":
            continue
        a = _coefficients(ds, j)
        checks = [r for r in sorted(j.runs, key=lambda r: r.seq) if r.purpose in ("check",
                                                                                 "final")]
        assert checks, j.number
        assert _passes(ds, j, a, checks[-1]), j.number
        checked += 1
    assert checked > 100


def test_stored_verdicts_match_the_core_and_the_job_page(ds: Session) -> None:
    """Run.within_tolerance agrees with the core on every check run; the app agrees too."""
    for j in _jobs(ds):
        if not any(r.purpose == "initial" for r in j.runs):
            continue
        a = _coefficients(ds, j)
        for r in j.runs:
            if r.purpose in ("check", "final"):
                assert r.within_tolerance is _passes(ds, j, a, r), (j.number, r.seq)
            else:
                assert r.within_tolerance is None
        calc = evaluate(ds, j)
        if j.state in ("in_tolerance", "certified", "dispatched"):
            assert calc.in_tolerance, j.number


def test_advised_corrections_are_the_cores_answer_to_the_run_they_answer(ds: Session) -> None:
    n = 0
    for j in _jobs(ds):
        if not j.corrections:
            continue
        rt = j.rotor.rotor_type
        radii = (rt.radius_1_mm, rt.radius_2_mm)
        a = _coefficients(ds, j)
        matrix = np.diag(np.array(radii, dtype=complex)) if a is None else a
        runs = {r.id: r for r in j.runs}
        for c in j.corrections:
            sol = influence.correction_from_coefficients(matrix, _seen(ds, j, runs[c.run_id]))
            w = sol.corrections[c.plane - 1]
            angle = w.angle_deg if c.action == "add" else normalize_deg(w.angle_deg + 180.0)
            assert c.advised_mass_g == pytest.approx(w.mass_g, rel=1e-9)
            assert abs((c.advised_angle_deg - angle + 180.0) % 360.0 - 180.0) < 1e-6
            assert c.radius_mm == radii[c.plane - 1]
            if c.split:
                assert c.mass_g == pytest.approx(sum(p["mass_g"] for p in c.split))
            n += 1
    assert n > 150


def test_learned_sets_come_from_jobs_that_reached_tolerance(ds: Session) -> None:
    sets = list(ds.scalars(select(InfluenceSet)))
    assert sets
    keys = Counter((s.rotor_type_id, s.machine_id, s.speed_rpm) for s in sets)
    assert max(keys.values()) > 1  # a new set per learning job (later ones never re-judge)
    for j in _jobs(ds):
        if j.influence_set_id is not None:  # corrected from a stored set: it keeps that one
            initial = min(r.taken_at for r in j.runs)
            assert ds.get(InfluenceSet, j.influence_set_id).learned_at < initial, j.number
            assert not any(r.purpose == "trial" for r in j.runs)
    assert any(j.influence_set_id is not None for j in _jobs(ds))
    for s in sets:
        job = ds.get(Job, s.source_job_id)
        assert job is not None and job.first_in_tolerance_at is not None
        assert any(r.purpose == "trial" for r in job.runs)
        assert s.learned_at >= job.first_in_tolerance_at


# --------------------------------------------------------------------------- machines, certs


def test_one_machine_due_soon_and_one_that_was_overdue_for_a_while(ds: Session) -> None:
    """The register rule of the traceability service, at the end date and in the past."""
    machines = {m.name: m for m in ds.scalars(select(Machine))}
    status = {name: tr.machine_status(ds, m, END) for name, m in machines.items()}
    assert not any(s.blocks for s in status.values())
    soon = [name for name, s in status.items() if s.state == "due_soon"]
    assert "Bay 1 — hard-bearing, 2 t" in soon
    assert status["Bay 1 — hard-bearing, 2 t"].days_left <= 14  # the default window
    lapsed = [j for j in _jobs(ds) if any("overdue" in t.reason for t in j.transitions)]
    assert len(lapsed) >= 2
    for j in lapsed:
        reopen = next(t for t in j.transitions if "overdue" in t.reason)
        before = [r for r in j.runs if r.taken_at < reopen.at and r.purpose == "check"]
        standing = tr.machine_status(ds, j.machine, before[-1].taken_at.date())
        assert standing.state == "overdue" and standing.overdue_since is not None
        # The job page's traceability panel says so for those runs.
        panel = jt.job_traceability(ds, j)
        assert any(seq == before[-1].seq for seq, _msg in panel.overdue_runs), j.number
        assert all(j.machine.name in msg and "quality manager" in msg
                   for _seq, msg in panel.overdue_runs)
        if j.state in ("certified", "dispatched"):
            last = max(r.taken_at for r in j.runs)
            assert not tr.machine_status(ds, j.machine, last.date()).blocks


def test_proving_tests_are_complete_records_of_the_service(ds: Session) -> None:
    rows = list(ds.scalars(select(MachineVerification)))
    assert len(rows) >= 5
    for v in rows:
        assert v.passed and v.performed_on <= END
        assert v.proving_rotor and v.proving_rotor_id is not None
        assert v.measured_umar_gmm is not None and v.claimed_umar_gmm is not None
        assert v.measured_umar_gmm <= v.claimed_umar_gmm
        assert v.urr_pct is not None and v.readings["planes"] and v.readings["urr"]
        assert ds.get(AuditEvent, ds.scalar(select(AuditEvent.id).where(
            AuditEvent.entity == "machine_verification", AuditEvent.entity_id == v.id))
        ).at.date() == v.performed_on


def test_proving_rotor_names_leave_the_mass_to_the_pages(ds: Session) -> None:
    """Walk finding: "Proving rotor PR-10 (shop's own, 10 kg) (10 kg, 2 plane(s), …)" — the
    pages add the mass beside the name, so a name that carries it says it twice."""
    rotors = list(ds.scalars(select(ProvingRotor)))
    assert rotors
    for r in rotors:
        assert not re.search(r"\d\s*(kg|t)\b", r.name), r.name


def test_four_w_over_n_jobs_carry_valid_residual_tests_before_their_certificates(
        ds: Session) -> None:
    certified = [j for j in _jobs(ds) if j.tolerance_method == "4w/n"
                 and j.state in ("certified", "dispatched")]
    assert len(certified) >= 3
    for j in certified:
        assert j.residual_test_required  # set for 4W/N jobs
        tests = residual_tests.residual_tests_of(ds, j)
        state = residual_tests.residual_test_state(j, tests)
        assert state.ok, (j.number, state.problems)
        cert = ds.scalars(select(Certificate).where(Certificate.job_id == j.id,
                                                    Certificate.state == "issued")).one()
        assert all(t.performed_at < cert.issued_at for t in state.latest.values() if t)
        # Printed on the certificate with its readings.
        from shopapp.certificates import issue as cert_service

        data = cert_service.certificate_data(cert)
        assert {t.plane for t in data.residual_tests} == {1, 2}
    # The readings are S·(U_res + T·e^{iθ_k}): the service's fit finds a residual below
    # the limit and T as the circle (one invalid test, a disagreeing repeat, is redone).
    tests = list(ds.scalars(select(ResidualTest)))
    invalid = [t for t in tests if not t.valid]
    assert invalid and all("repeat of position 1" in t.invalid_reason for t in invalid)
    redone = [t for t in tests if t.valid and t.job_id == invalid[0].job_id
              and t.plane == invalid[0].plane and t.performed_at > invalid[0].performed_at]
    assert redone


def test_an_arbor_with_a_drifting_error_history_and_jobs_on_it(ds: Session) -> None:
    arbor = ds.scalars(select(Arbor)).one()
    history = list(ds.scalars(select(ArborErrorMeasurement)
                              .where(ArborErrorMeasurement.arbor_id == arbor.id)
                              .order_by(ArborErrorMeasurement.measured_on)))
    assert len(history) >= 3
    # Slow drift: the error grows from the first to the last measurement, a little each time.
    assert history[-1].error_1_gmm > history[0].error_1_gmm
    for a, b in itertools.pairwise(history):
        assert abs(b.error_1_gmm - a.error_1_gmm) < 0.5 * a.error_1_gmm
    on_it = [j for j in _jobs(ds) if j.arbor_id == arbor.id]
    assert len(on_it) >= 2
    for j in on_it:
        sub = jt.arbor_subtraction(ds, j)
        if sub is None:
            continue
        first = min(r.taken_at for r in j.runs) if j.runs else None
        assert first is None or sub.measurement.measured_on <= first.date()
        assert jt.arbor_error_gmm(ds, j) is not None


def test_key_conventions_on_two_rotor_types(ds: Session) -> None:
    keyed = {rt.part_number: rt for rt in ds.scalars(select(RotorType))
             if rt.key_convention != "none"}
    assert set(keyed) == set(demo_scenario.KEY_CONVENTIONS)
    info = tr.key_info(keyed["BMR-75K"])
    assert info.compensation is not None and info.compensation.correction_mass_g > 0


def test_a_fan_job_carries_a_run_up_through_its_resonance(ds: Session) -> None:
    records = list(ds.scalars(select(RunUpRecord)))
    assert len(records) == 1
    rec = records[0]
    job = ds.get(Job, rec.job_id)
    assert job is not None and job.rotor.rotor_type.kind == "fan"
    assert rec.recorded_on == job.received_on
    quality = ds.scalars(select(User).where(User.role == "quality")).first()
    assert quality is not None
    result = analyse_run_up(ds, rec, by=quality)
    main = result.main
    assert main is not None and main.bracketed
    # The invented readings put the critical speed at 70 % of the service speed (or lower
    # on a slow machine) with ζ = 0.06 (shopapp.resonance.samples); the fit, an independent
    # path through shopapp.balancing.runup, finds them again within the noise.
    expected = min(0.7 * job.service_speed_rpm, job.machine.max_speed_rpm / 1.6)
    assert main.critical_speed_rpm == pytest.approx(expected, rel=0.03)
    assert main.damping_ratio == pytest.approx(0.06, abs=0.015)


def test_certified_jobs_hold_one_valid_certificate_some_reissued_some_void(ds: Session) -> None:
    from shopapp.certificates import issue as cert_service
    from shopapp.certificates import register

    certs = list(ds.scalars(select(Certificate)))
    for j in _jobs(ds):
        valid = [c for c in certs if c.job_id == j.id and c.state == "issued"]
        assert len(valid) == (1 if j.state in ("certified", "dispatched") else 0), j.number
    void = [c for c in certs if c.state == "void"]
    assert void and all(c.void_reason for c in void)
    assert any(c.revision > 1 for c in certs)
    sample = certs[0]
    assert hashlib.sha256(sample.pdf).hexdigest() == sample.pdf_sha256
    # Issue 15: the stored file starts with the reproducible rendering (attached data
    # follows); a number alone only says it exists, number + code gives the state.
    unsigned = cert_service.rerender(sample)
    assert sample.pdf[:len(unsigned)] == unsigned
    assert register.verify(ds, sample.number).status == "exists"
    assert register.check(ds, sample.number, sample.verification_code).status in (
        "valid", "superseded", "void")


def _qr_texts(pdf: bytes) -> list[str]:
    """The QR codes of the last page, read by PDFium (pypdfium2) and zxing-cpp."""
    import pypdfium2 as pdfium
    import zxingcpp

    doc = pdfium.PdfDocument(pdf)
    try:
        image = doc[len(doc) - 1].render(scale=300 / 72).to_pil()
    finally:
        doc.close()
    return [r.text for r in zxingcpp.read_barcodes(image)
            if r.format == zxingcpp.BarcodeFormat.QRCode]


def test_the_demo_certificates_are_signed_with_the_instance_key_and_verify(
        ds: Session, signing_dir: Path) -> None:
    """Issue 15's done-when on the demo shop: each certificate is signed with the
    instance's key (made once, at the first certificate), verifies by itself, and its QR
    code opens its verify address on BASE_URL. Checked with pyHanko's validator
    (pdfsign.inspect), an independent pikepdf + asn1crypto + cryptography check of the
    CMS signature, and PDFium + zxing-cpp reading the QR code."""
    from urllib.parse import parse_qs, urlsplit

    from shopapp.certificates import issue as cert_service
    from shopapp.certificates import pdfsign, signing
    from tests.certificates.signed import independent_check

    key = signing.current_key(signing_dir)
    assert key is not None
    known = signing.known_certificates(signing_dir)
    assert [k.fingerprint for k in known] == [key.info.fingerprint]
    made = list(ds.scalars(select(AuditEvent).where(AuditEvent.entity == "signing_key")))
    assert [e.action for e in made] == ["create"]
    certs = list(ds.scalars(select(Certificate).order_by(Certificate.id)))
    assert len(certs) > 50
    # pyHanko's validation costs a little each: the first and last issued, every revision
    # after the first and every void one, and every tenth of the rest.
    sample = [c for k, c in enumerate(certs)
              if k in (0, len(certs) - 1) or c.revision > 1 or c.state == "void" or k % 10 == 0]
    for cert in sample:
        proof = pdfsign.inspect(cert.pdf, known)
        assert proof.proven, (cert.number, cert.revision, proof.lines())
        assert proof.signer_known == "current"
        assert proof.data_json == cert.data_json.encode("utf-8")
        data = cert_service.certificate_data(cert)
        assert data.signed_by == key.info.subject
        url = urlsplit(data.verify_url)
        assert f"{url.scheme}://{url.netloc}" == BASE_URL and url.path == "/verify"
        assert parse_qs(url.query) == {"n": [cert.number], "c": [cert.verification_code]}
    one = sample[-1]
    check = independent_check(one.pdf)
    assert check.covers_whole_file and check.digest_matches and check.signature_verifies
    assert check.signer_subject == key.certificate.subject.rfc4514_string()
    assert _qr_texts(one.pdf) == [cert_service.certificate_data(one).verify_url]


# --------------------------------------------------------------------------- refusals, seed


def test_a_second_load_is_refused_and_writes_nothing(ds: Session) -> None:
    before = ds.scalar(select(func.count()).select_from(Job))
    with pytest.raises(demo.DemoRefused, match="--force"):
        demo.load_demo(ds, seed=SEED, years=0.5, end_date=END, signing_dir=None)
    assert ds.scalar(select(func.count()).select_from(Job)) == before


def test_force_adds_a_second_shop_beside_and_the_seed_repeats_it(ds: Session) -> None:
    names = sorted(ds.scalars(select(Customer.name)))
    first = _fingerprint(ds, tag="")
    demo.load_demo(ds, seed=SEED, years=0.5, jobs_per_year=360, end_date=END, force=True,
                   certificates=False, signing_dir=None)
    assert sorted(ds.scalars(select(Customer.name).where(~Customer.name.like("%[demo 2]")))) \
        == names
    assert _fingerprint(ds, tag=" [demo 2]") == first
    ds.rollback()


def _fingerprint(ds: Session, tag: str) -> list[tuple[Any, ...]]:
    """Everything the seed decides, for one demo shop (by its customer-name tag)."""
    custs = [c.id for c in ds.scalars(select(Customer)) if c.name.endswith(tag)
             and (tag or "[demo" not in c.name)]
    rows = ds.execute(
        select(Job.state, Job.kind, Job.received_on, Job.dispatched_on, Job.reopen_count,
               Rotor.serial_number, func.count(Run.id), func.sum(Run.seq))
        .join(Rotor, Rotor.id == Job.rotor_id).outerjoin(Run, Run.job_id == Job.id)
        .where(Job.customer_id.in_(custs)).group_by(Job.id, Rotor.serial_number)
        .order_by(Job.received_on, Rotor.serial_number, Job.id)).all()
    amps = ds.scalars(
        select(func.sum(Correction.mass_g)).join(Job, Job.id == Correction.job_id)
        .where(Job.customer_id.in_(custs))).one()
    return [tuple(r) for r in rows] + [(round(amps, 6),)]


def test_scenario_rotor_types_pass_the_registry_rules() -> None:
    for spec in demo_scenario.ROTOR_TYPES:
        values = {
            "mass_kg": spec.mass_kg, "service_speed_rpm": spec.service_speed_rpm,
            "first_critical_rpm": spec.first_critical_rpm, "bearing_a_mm": spec.bearing_a_mm,
            "bearing_b_mm": spec.bearing_b_mm, "centre_of_mass_mm": spec.centre_of_mass_mm,
            "plane_1_mm": spec.plane_1_mm, "plane_2_mm": spec.plane_2_mm,
            "radius_1_mm": spec.radius_1_mm, "radius_2_mm": spec.radius_2_mm,
            "method_1": spec.method, "method_2": spec.method, "positions_1": spec.positions,
            "positions_2": spec.positions, "density_g_cm3": spec.density_g_cm3,
            "tolerance_grade": spec.tolerance_grade if spec.tolerance_method == "grade"
            else None,
            "tolerance_gmm": spec.explicit_gmm,
        }
        assert rotor_types.validate_geometry(values) == {}, spec.part_number


def test_working_days_skip_weekends_and_the_year_end_closure() -> None:
    # Calendar facts (common knowledge): 2026-03-27 is a Friday, 2025-12-24 a Wednesday.
    assert days.add_working_days(dt.date(2026, 3, 27), 1) == dt.date(2026, 3, 30)
    assert days.add_working_days(dt.date(2025, 12, 23), 1) == dt.date(2026, 1, 2)
    assert days.add_working_days(dt.date(2026, 3, 28), 0) == dt.date(2026, 3, 30)


# --------------------------------------------------------------------------- bulk


def test_bulk_mode_is_consistent_with_the_core(ds: Session) -> None:
    summary = bulk.generate_bulk(ds, jobs=300, runs_per_job=10, seed=3, years=1.0, end_date=END,
                                 force=True)
    assert 280 <= summary.jobs <= 340
    assert summary.runs >= 10 * summary.jobs * 0.9
    assert summary.certificates == 0
    custs = select(Customer.id).where(Customer.name.like("%[demo 2]"))
    jobs = [j for j in _jobs(ds) if j.customer_id in set(ds.scalars(custs))]
    assert len(jobs) == summary.jobs
    dispatched = [j for j in jobs if j.state == "dispatched"]
    assert len(dispatched) > 200
    for j in dispatched[:80]:
        a = _coefficients(ds, j)
        for r in j.runs:
            if r.purpose in ("check", "final"):
                assert r.within_tolerance is _passes(ds, j, a, r), (j.number, r.seq)
    ds.rollback()


def test_bulk_mode_gives_the_same_rows_for_the_same_seed(ds: Session) -> None:
    # On SQLite two worker processes play the jobs (shopapp.demo.parallel) and their rows
    # arrive in whatever order the workers finish: the history must not depend on it.
    def rows() -> dict[str, list[Any]]:
        bulk.generate_bulk(ds, jobs=150, runs_per_job=4, seed=11, years=0.5, end_date=END,
                           force=True)
        out = {}
        for table in ("job", "job_transition", "run", "run_reading", "correction",
                      "influence_set"):
            out[table] = list(ds.connection().exec_driver_sql(
                f"SELECT * FROM {table} ORDER BY id").all())
        ds.rollback()
        return out

    first, second = rows(), rows()
    assert len(first["job"]) > 100 and len(first["run"]) > 400
    assert first == second


def test_bulk_load_pauses_the_cycle_collector_and_gives_it_back(ds: Session) -> None:
    # The load runs with Python's cyclic collector paused (its full passes over millions of
    # live rows grew with the history); afterwards, and after a failed load, it runs again.
    seen: dict[str, bool] = {}

    def note(message: str) -> None:
        seen[message.split()[1]] = gc.isenabled()

    bulk.generate_bulk(ds, jobs=20, runs_per_job=4, seed=2, years=0.2, end_date=END,
                       force=True, progress=note)
    ds.rollback()
    assert seen["simulating"] is False and seen["job"] is False  # "job facts for ..."
    assert gc.isenabled()

    def fail(_message: str) -> None:
        raise RuntimeError("stopped by the test")

    with pytest.raises(RuntimeError, match="stopped by the test"):
        bulk.generate_bulk(ds, jobs=20, runs_per_job=4, seed=2, years=0.2, end_date=END,
                           force=True, progress=fail)
    ds.rollback()
    assert gc.isenabled()


def test_bulk_jobs_are_split_by_whole_rotor_types() -> None:
    from types import SimpleNamespace

    from shopapp.demo import parallel

    # Plans stand-ins: only the rotor type is read. Types 1-4 with 5, 3, 3, 1 jobs.
    types = [1] * 5 + [2] * 3 + [3] * 3 + [4]
    order: list[Any] = [SimpleNamespace(rotor=SimpleNamespace(type=SimpleNamespace(id=t)))
                        for t in types]
    groups = parallel.split(order, 2)
    assert sorted(len(g) for g in groups) == [6, 6]  # {1, 4} and {2, 3}
    place = {id(p): i for i, p in enumerate(order)}
    for g in groups:  # each group keeps the start order
        assert [place[id(p)] for p in g] == sorted(place[id(p)] for p in g)
    assert not ({p.rotor.type.id for p in groups[0]} & {p.rotor.type.id for p in groups[1]})


def test_bad_parameters_are_refused_with_the_field() -> None:
    from shopapp.core.errors import ValidationFailed

    with pytest.raises(ValidationFailed, match="years"):
        demo.load_demo(None, years=0, signing_dir=None)  # type: ignore[arg-type]
    with pytest.raises(ValidationFailed, match="runs_per_job"):
        bulk.generate_bulk(None, jobs=10, runs_per_job=2)  # type: ignore[arg-type]


def test_bulk_time_text_is_what_the_column_type_stores_on_sqlite() -> None:
    # Checked against SQLAlchemy's own processors (UTCDateTime's, then SQLite DATETIME's),
    # which the ordinary path stores through; times in and out of UTC, with and without
    # microseconds, either side of midnight and of a year end.
    from sqlalchemy.dialects import sqlite

    from shopapp.demo import store
    from shopapp.models.base import UTCDateTime

    dialect = sqlite.dialect()
    column_type = UTCDateTime()
    fast = store.bind_processor(column_type, dialect)
    assert fast is store.sqlite_utc_text
    inner = column_type.impl_instance.dialect_impl(dialect).bind_processor(dialect)
    assert inner is not None
    rng = random.Random(5)
    zones = [dt.UTC, dt.timezone(dt.timedelta(hours=2)),
             dt.timezone(dt.timedelta(hours=-9, minutes=-30))]
    values = [dt.datetime(2025, 12, 31, 23, 59, 59, tzinfo=zones[1]),
              dt.datetime(2026, 1, 1, 0, 0, 0, tzinfo=dt.UTC)]
    values += [dt.datetime(2020, 1, 1, tzinfo=rng.choice(zones))
               + dt.timedelta(seconds=rng.randrange(10**8),
                              microseconds=rng.choice([0, rng.randrange(10**6)]))
               for _ in range(300)]
    for v in values:
        assert fast(v) == inner(column_type.process_bind_param(v, dialect)), v
    with pytest.raises(ValueError, match="naive"):
        fast(dt.datetime(2026, 1, 1))


def test_bulk_indexes_are_built_after_the_rows_exactly_as_they_were(ds: Session) -> None:
    # The parallel bulk path drops the non-unique indexes of the tables its workers fill and
    # creates them again from their stored DDL: afterwards sqlite_master must hold the very
    # same indexes (compared with what the migrations/metadata made), and inside it the
    # unique ones must still be there to check each row.
    from shopapp.demo import store

    conn = ds.connection()
    if conn.dialect.name != "sqlite":
        with pytest.raises(ValueError, match="SQLite only"), \
                store.sqlite_indexes_built_after(ds):
            pass
        return

    def indexes() -> list[tuple[str, str, str]]:
        return [tuple(r) for r in conn.exec_driver_sql(
            "SELECT tbl_name, name, coalesce(sql, '') FROM sqlite_master "
            "WHERE type = 'index' ORDER BY tbl_name, name")]

    before = indexes()
    bulk_tables = {m.__tablename__ for m in store.BULK_TABLES}
    non_unique = [i for i in before if i[0] in bulk_tables and i[2]
                  and not i[2].upper().startswith("CREATE UNIQUE")]
    assert len(non_unique) >= 10  # run, audit_event, correction … carry several each
    with store.sqlite_indexes_built_after(ds):
        inside = indexes()
        assert not set(non_unique) & set(inside)
        assert set(inside) == set(before) - set(non_unique)
        # the job number stays unique
        assert any(i[1].startswith("sqlite_autoindex_job_") or
                   (i[0] == "job" and i[2].upper().startswith("CREATE UNIQUE")) for i in inside)
    assert indexes() == before
