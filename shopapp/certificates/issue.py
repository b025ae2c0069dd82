"""Balance certificates: issue, reissue and void, and the certified data they state.

Rules (issue 5):

- Only the quality role issues, reissues or voids (``issue_certificates``).
- A certificate is issued only for a job ``in_tolerance`` whose last check or
  final run is within every plane's limit (the verdict of
  :func:`shopapp.jobs.calc.evaluate`) on a machine that was not
  overdue or failed on that run's date — the one register rule of
  :func:`shopapp.traceability.services.require_machine_current` (a machine
  never tested counts from its register entry, and its certificate says "no
  verification on file"). A job that requires a residual-unbalance test needs
  each plane's latest test valid and within its limit.
- Issued certificates never change (the database refuses it too, see
  :mod:`shopapp.models.certificates`). A mistake is fixed by :func:`reissue`:
  the same number with the next revision, and the old revision is voided with
  "superseded by revision n". :func:`void` alone needs a reason as well.
- Numbers are ``BC-<year>-<5-digit running number>``; the running number
  restarts each year. A job keeps its number for life: reissues and a
  certificate issued again after rework are revisions of it.

The certified data is a :class:`~shopapp.reports.certificate.CertificateData`;
its canonical JSON and the PDF rendered from it are stored with their SHA-256.

Issue 15, certificates that prove themselves: each revision gets a random
verification code (printed with the number, and in the verify address and its
QR code); the rendered PDF gets the canonical JSON attached as
``certificate-data.json`` and is signed with the shop's key
(:mod:`shopapp.certificates.pdfsign`, :mod:`shopapp.certificates.signing`); the
stored bytes and ``pdf_sha256`` are those of the signed file. Re-rendering the
stored JSON gives the unsigned rendering, which the stored file starts with byte
for byte (for certificates issued before signing: the whole stored file).
Finding and verifying certificates is :mod:`shopapp.certificates.register`.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import re
from dataclasses import dataclass
from pathlib import Path
from urllib.parse import quote, urlsplit

from sqlalchemy import func, select
from sqlalchemy.orm import Session, selectinload

from shopapp.balancing.phasors import amplitude_angle
from shopapp.certificates import pdfsign, signing
from shopapp.certificates.queries import (
    CERTIFIABLE_STATES,
    by_number,
    code_taken,
    job_certificates,
)
from shopapp.core import audit, locks
from shopapp.core.clock import shop_date
from shopapp.core.display import ShopDisplay, fixed, of_limit, plain, quantity
from shopapp.core.errors import TransitionRefused, ValidationFailed
from shopapp.core.permissions import require
from shopapp.core.settings import get_settings
from shopapp.jobs import calc as job_calc
from shopapp.jobs import certificate_link
from shopapp.jobs import evidence as job_traceability
from shopapp.jobs import states as job_states
from shopapp.jobs.certificate_link import (
    audit_certificate as _audit,
)
from shopapp.jobs.certificate_link import (
    certificate_summary as _summary,
)
from shopapp.jobs.certificate_link import (
    now_whole_seconds,
)
from shopapp.jobs.certificate_link import void_certificate as _void
from shopapp.models import (
    Certificate,
    Correction,
    InfluenceSet,
    Job,
    Machine,
    Run,
    ShopSettings,
    User,
)
from shopapp.models.certificates import new_verification_code
from shopapp.reports import certificate as report
from shopapp.reports.certificate import CertificateData, CorrectionLine, LimitLine, PlaneVector
from shopapp.traceability import services as traceability

NUMBER_PREFIX = "BC"
NUMBER_RE = re.compile(r"^BC-(\d{4})-(\d{5,})$")
MIN_REASON_LENGTH = 5
MAX_REASON_LENGTH = 1000
REISSUABLE_JOB_STATES = ("certified", "dispatched")
KIND_WORDS = {"hard": "hard-bearing", "soft": "soft-bearing"}

# --------------------------------------------------------------------------- reading a job


@dataclass(frozen=True)
class JobEvidence:
    """What the certificate is built from: the evaluated job and its judged runs."""

    job: Job
    calc: job_calc.JobCalc
    runs: tuple[Run, ...]
    corrections: tuple[Correction, ...]
    final_run: Run
    final: job_calc.RunVerdict
    initial_run: Run | None
    initial: job_calc.RunVerdict | None
    machine: Machine
    machine_status: traceability.VerificationStatus | None
    as_of: dt.datetime | None = None


def _load_job(session: Session, job: Job, as_of: dt.datetime | None = None
              ) -> tuple[list[Run], list[Correction], list[InfluenceSet]]:
    """The job's runs, corrections and stored sets; with ``as_of`` only what existed then."""
    # Struck-out runs and corrections are no evidence (and cannot be struck once a
    # certificate is valid).
    run_q = select(Run).where(Run.job_id == job.id, Run.struck_at.is_(None))
    corr_q = select(Correction).where(Correction.job_id == job.id, Correction.struck_at.is_(None))
    if as_of is not None:
        run_q = run_q.where(Run.taken_at <= as_of)
        corr_q = corr_q.where(Correction.applied_at <= as_of)
    runs = list(session.scalars(run_q.options(selectinload(Run.readings)).order_by(Run.seq)))
    corrections = list(session.scalars(corr_q.order_by(Correction.id)))
    sets: list[InfluenceSet] = []
    if job.machine_id is not None:
        sets = list(session.scalars(
            select(InfluenceSet).where(InfluenceSet.rotor_type_id == job.rotor.rotor_type_id,
                                       InfluenceSet.machine_id == job.machine_id)
        ))
    return runs, corrections, sets


def evidence(session: Session, job: Job, *, as_of: dt.datetime | None = None) -> JobEvidence:
    """Check that ``job`` may be certified and gather what the certificate states.

    ``as_of``: judge the job as it stood at that moment (runs, corrections and
    residual tests made up to then) — a historical certificate; the whole job
    when omitted. The machine's verification is judged on the final run's date
    by the register rule of :func:`shopapp.traceability.services.require_machine_current`.

    Raises
    ------
    TransitionRefused
        With a message saying which condition is not met.
    """
    if job.machine is None:
        raise TransitionRefused(
            f"Job {job.number} has no balancing machine recorded: record the machine the "
            "rotor was balanced on before certifying."
        )
    runs, corrections, sets = _load_job(session, job, as_of)
    calc = job_calc.evaluate(job, runs=runs, corrections=corrections, influence_sets=sets,
                             arbor_error_gmm=job_traceability.arbor_error_gmm(session, job))
    if calc.tolerance is None:
        raise TransitionRefused(f"Job {job.number}: {calc.tolerance_error or 'no tolerance'}")
    final = calc.last_check
    if final is None:
        raise TransitionRefused(
            f"Job {job.number} has no check or final run: log one after the last correction."
        )
    if not final.judged:
        raise TransitionRefused(
            f"Job {job.number}: run {final.seq} cannot be judged ({final.message})."
        )
    if not final.passed:
        out = [f"{r.label} at {of_limit(r.pct)} of its limit"
               for r in final.rows if not r.passed]
        raise TransitionRefused(
            f"Job {job.number}: the last {final.purpose} run (run {final.seq}) is out of "
            f"tolerance ({'; '.join(out)}). Only a job within every plane's limit is certified."
        )
    by_id = {r.id: r for r in runs}
    final_run = by_id[final.run_id]
    initial_run = next((r for r in runs if r.purpose == "initial"), None)
    initial = calc.verdicts.get(initial_run.id) if initial_run is not None else None
    on = shop_date(final_run.taken_at)
    # The register rule (the only one: a machine never tested counts from its register
    # entry) on the final run's date, and a required residual-unbalance test.
    try:
        status = job_traceability.check_certifiable(session, job, on, as_of=as_of)
    except traceability.MachineNotCurrent as exc:
        raise TransitionRefused(f"Job {job.number}: {exc.message}") from None
    return JobEvidence(job, calc, tuple(runs), tuple(corrections), final_run, final,
                       initial_run, initial, job.machine, status, as_of)


# --------------------------------------------------------------------------- building the data


def _angle_words(settings: ShopSettings) -> str:
    sense = "in" if settings.angle_sense == "with_rotation" else "against"
    zero = ("from the reference mark" if not settings.angle_zero_deg
            else f"from a zero {plain(settings.angle_zero_deg)}° from the reference mark")
    return f"degrees {sense} the direction of rotation, {zero}"


def _vector(show: ShopDisplay, plane: int, value_gmm: complex) -> PlaneVector:
    """One plane's unbalance as the certificate states it: g·mm, the shop's unit and angle."""
    mag, ang = amplitude_angle(value_gmm)
    return PlaneVector(plane, mag, show.unb(mag), show.angle(ang))


def _correction_details(c: Correction, show: ShopDisplay) -> str:
    parts = []
    if c.split:
        items = []
        for p in c.split:
            where = f"position {p['position']} " if p.get("position") is not None else ""
            # The job page's figures for a mass (older certificates printed 0.1 g; the
            # integrity check compares these numbers, not the text).
            items.append(f"{quantity(float(p['mass_g']), 'g')} at {where}"
                         f"({quantity(show.angle(float(p['angle_deg'])), '°')})")
        parts.append("split: " + ", ".join(items))
    if c.drill_depth_mm is not None:
        holes = c.drill_holes or 1
        dia = f" Ø{plain(c.drill_diameter_mm)} mm" if c.drill_diameter_mm else ""
        parts.append(f"drilled {holes} hole{'s' if holes > 1 else ''}{dia}, depth "
                     f"{fixed(c.drill_depth_mm, 1)} mm")
    return "; ".join(parts)


# Names of the judged quantities as the certificate prints them.
_LIMIT_NAMES = {"static": "static (at the centre of mass)",
                "couple": "couple (pair in planes 1 and 2)"}


def _limit_lines(v: job_calc.RunVerdict, show: ShopDisplay) -> tuple[LimitLine, ...]:
    """The rows that decide the verdict, and only those (one basis on the certificate).

    Residuals in planes the tolerance does not judge (the correction planes of
    an ISO tolerance) are stated in the residual table without a limit.
    """
    return tuple(
        LimitLine(_LIMIT_NAMES.get(r.label, r.label), r.limit_gmm, show.unb(r.limit_gmm),
                  r.residual_gmm, show.unb(r.residual_gmm), r.pct, r.passed, True)
        for r in v.rows
    )


def _tolerance_words(job: Job, tol: job_calc.JobTolerance) -> str:
    if job.tolerance_method == "grade":
        return f"ISO 21940-11 balance grade G {plain(job.tolerance_grade)}"
    if job.tolerance_method == "4w/n":
        return "4W/N (API-style), W the static journal load, N the service speed"
    return "customer-specified limits per correction plane"


def build_data(
    session: Session,
    ev: JobEvidence,
    *,
    number: str,
    revision: int,
    reason: str,
    issued_at: dt.datetime,
    issued_by: User,
    verification_code: str = "",
    verify_url: str = "",
    signed_by: str = "",
) -> CertificateData:
    """The certified data of one revision (rounded as stored)."""
    job = ev.job
    rt = job.rotor.rotor_type
    settings = get_settings(session)
    show = ShopDisplay(settings)
    tol = ev.calc.tolerance
    assert tol is not None
    planes = rt.planes
    initial: tuple[PlaneVector, ...] = ()
    notes: list[str] = []
    if ev.initial is not None and ev.initial.judged and ev.initial.residual_gmm:
        initial = tuple(_vector(show, k + 1, u) for k, u in enumerate(ev.initial.residual_gmm))
    else:
        notes.append("The initial unbalance could not be computed from the initial run's "
                     "readings; it is not shown.")
    residual = tuple(_vector(show, k + 1, u) for k, u in enumerate(ev.final.residual_gmm))
    corrections = tuple(
        CorrectionLine(c.plane, c.action, c.mass_g, show.angle(c.angle_deg), c.radius_mm,
                       _correction_details(c, show))
        for c in ev.corrections
    )
    status = ev.machine_status
    operator = job.operator
    if operator is None and ev.final_run.by_id is not None:
        operator = session.get(User, ev.final_run.by_id)
    data = CertificateData(
        schema=report.SCHEMA_VERSION,
        number=number,
        revision=revision,
        revision_reason=reason,
        issued_at=issued_at.astimezone(dt.UTC).isoformat(timespec="seconds"),
        shop_name=settings.shop_name,
        shop_address=settings.shop_address,
        customer_name=job.customer.name,
        customer_order_ref=job.customer_order_ref,
        job_number=job.number,
        rotor_part_number=rt.part_number,
        rotor_description=rt.description,
        serial_number=job.rotor.serial_number,
        mass_kg=rt.mass_kg,
        service_speed_rpm=job.service_speed_rpm,
        balancing_speed_rpm=ev.final_run.speed_rpm,
        planes=planes,
        radius_1_mm=rt.radius_1_mm,
        radius_2_mm=rt.radius_2_mm if planes == 2 else None,
        bearing_a_mm=rt.bearing_a_mm,
        bearing_b_mm=rt.bearing_b_mm,
        centre_of_mass_mm=rt.centre_of_mass_mm,
        plane_1_mm=rt.plane_1_mm,
        plane_2_mm=rt.plane_2_mm if planes == 2 else None,
        tolerance_method=job.tolerance_method,
        tolerance_basis=_tolerance_words(job, tol),
        grade_mm_s=job.tolerance_grade if job.tolerance_method == "grade" else None,
        u_per_gmm=tol.u_per_gmm,
        e_per_um=tol.e_per_um,
        journal_load_a_kg=job.journal_load_a_kg if job.tolerance_method == "4w/n" else None,
        journal_load_b_kg=job.journal_load_b_kg if job.tolerance_method == "4w/n" else None,
        reference_planes=ev.final.reference,
        unit=show.unit,
        angle_convention=_angle_words(settings),
        machine_name=ev.machine.name,
        machine_kind=KIND_WORDS.get(ev.machine.bearing_kind, ev.machine.bearing_kind),
        machine_verified_on=(status.last_passed_on.isoformat()
                             if status is not None and status.last_passed_on else None),
        machine_verification=("no verification on file"
                              if status is None or status.last_test_on is None
                              else "passed" if status.last_test_passed else "failed"),
        received_on=job.received_on.isoformat(),
        balanced_on=shop_date(ev.final_run.taken_at).isoformat(),
        initial_run=ev.initial_run.seq if ev.initial_run is not None else 0,
        final_run=ev.final_run.seq,
        initial=initial,
        corrections=corrections,
        residual=residual,
        limits=_limit_lines(ev.final, show),
        plot_limits_shop=tuple(show.unb(x) for x in tol.plane_limits_gmm),
        passed=bool(ev.final.passed),
        operator_name=operator.full_name if operator is not None else "",
        issued_by_name=issued_by.full_name,
        notes=tuple(notes),
        tolerance_notes=tol.notes,
        verification_code=verification_code,
        verify_url=verify_url,
        signed_by=signed_by,
        **job_traceability.certificate_fields(session, job, ev.calc, to_shop=show.unb,
                                              to_display_deg=show.angle, as_of=ev.as_of),
    )
    return report.normalized(data)


# --------------------------------------------------------------------------- numbers and rows


def next_number(session: Session, year: int) -> str:
    """``BC-<year>-<n>`` with n one more than the largest used this year."""
    prefix = f"{NUMBER_PREFIX}-{year:04d}-"
    locks.hold_sequence(session, f"certificate_number:{year:04d}")
    # The running number is zero-padded, so the longest, then largest, numbers come first;
    # a few are read in case a malformed number sorts before the real largest.
    numbers = session.scalars(
        select(Certificate.number).where(Certificate.number.like(prefix + "%"))
        .order_by(func.length(Certificate.number).desc(), Certificate.number.desc()).limit(20)
    )
    best = 0
    for n in numbers:
        m = NUMBER_RE.match(n)
        if m:
            best = max(best, int(m.group(2)))
    return f"{prefix}{best + 1:05d}"


def _store(
    session: Session, data: CertificateData, job: Job, *, by: User, issued_at: dt.datetime,
    key: signing.ShopKey | None,
) -> Certificate:
    text = report.canonical_json(data)
    unsigned = report.render(data)
    pdf = pdfsign.seal(unsigned, text, key,
                       reason=f"Balance certificate {data.number} revision {data.revision}")
    cert = Certificate(
        number=data.number,
        revision=data.revision,
        job_id=job.id,
        state="issued",
        issued_by_id=by.id,
        issued_at=issued_at,
        reason=data.revision_reason,
        pdf=pdf,
        pdf_sha256=hashlib.sha256(pdf).hexdigest(),
        data_json=text,
        data_sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(),
        verification_code=data.verification_code,
    )
    session.add(cert)
    session.flush()
    return cert


# --------------------------------------------------------------------------- publishing


def public_base(base_url: str | None) -> str:
    """The shop's public address (config ``BASE_URL``) without a trailing slash; "" when unset.

    Raises :class:`ValidationFailed` (field ``BASE_URL``) for anything but an
    http(s) address without query or fragment.
    """
    base = (base_url or "").strip().rstrip("/")
    if not base:
        return ""
    parts = urlsplit(base)
    if parts.scheme not in ("http", "https") or not parts.netloc or parts.query or parts.fragment:
        raise ValidationFailed("BASE_URL", f"{base!r} is not a web address such as "
                                           "https://balancing.example.com; fix the setting")
    return base


def verify_url(base: str, number: str, code: str) -> str:
    """``<base>/verify?n=<number>&c=<code>`` (only the path when ``base`` is empty)."""
    return f"{base}/verify?n={quote(number)}&c={quote(code)}"


def _fresh_code(session: Session) -> str:
    code = new_verification_code()
    while code_taken(session, code):  # 50 random bits: a repeat is all but impossible
        code = new_verification_code()
    return code


def _signer(session: Session, signing_dir: Path | None, by: User) -> signing.ShopKey | None:
    """The shop key (made on first use, which is audited); None without a signing folder."""
    if signing_dir is None:
        return None
    key, made = signing.load_or_create(signing_dir, get_settings(session).shop_name)
    if made:
        info = key.info
        audit.record(session, by=by, entity="signing_key", entity_id=None, action="create",
                     after={"subject": info.subject, "fingerprint": info.fingerprint,
                            "valid_until": info.not_after.isoformat()})
    return key


def _now() -> dt.datetime:
    return now_whole_seconds()


def _moment(value: dt.datetime | None, field: str) -> dt.datetime:
    """A given historical moment (aware, not in the future) in whole UTC seconds, else now."""
    now = _now()
    if value is None:
        return now
    if not isinstance(value, dt.datetime) or value.tzinfo is None:
        raise ValidationFailed(field, "must be a date and time with its time zone")
    moment = value.astimezone(dt.UTC).replace(microsecond=0)
    if moment > now:
        raise ValidationFailed(field, f"{moment.isoformat()} is in the future")
    return moment


def _reason(reason: str | None, field: str = "reason") -> str:
    text = (reason or "").strip()
    if len(text) < MIN_REASON_LENGTH:
        raise ValidationFailed(
            field, f"is required: say in at least {MIN_REASON_LENGTH} characters why"
        )
    if len(text) > MAX_REASON_LENGTH:
        raise ValidationFailed(field, f"is too long: {len(text)} characters, at most "
                                      f"{MAX_REASON_LENGTH}")
    return text


def certificate_data(cert: Certificate) -> CertificateData:
    """The stored certified data of a revision."""
    return CertificateData.from_json(cert.data_json)


def rerender(cert: Certificate) -> bytes:
    """The unsigned PDF rendered again from the stored data.

    With the renderer that issued it, the stored file starts with these bytes exactly
    (the embedded data and the signature are one incremental update after them); for a
    certificate issued before signing it is the whole stored file. Files issued before
    issue 13's faster rendering show the same pages with other bytes.
    """
    return report.render(certificate_data(cert))


# --------------------------------------------------------------------------- use-cases


def issue(session: Session, job: Job, *, by: User, issued_at: dt.datetime | None = None,
          signing_dir: Path | None = None, base_url: str = "") -> Certificate:
    """Issue a certificate for ``job`` and mark the job certified.

    Refused (each with its own message) for a role other than quality, a job not
    ``in_tolerance``, a job that already has a valid certificate, a last check
    run that is out of tolerance or cannot be judged, and a machine whose
    verification had failed or was overdue on the run's date.

    ``issued_at``: a past moment for loading historical records (the demo
    shop); the job is then judged as it stood at that moment and the
    transition is dated then. Default: now.

    ``signing_dir``: the instance's signing folder
    (:func:`shopapp.certificates.signing.signing_folder`); the PDF is signed with the
    shop key there (made on first use). None only where nothing is signed: the demo
    shop's historical replay. ``base_url``: the shop's public address (config
    ``BASE_URL``) printed in the verify address; "" prints the path only.
    """
    require(by, "issue_certificates")
    base = public_base(base_url)
    locks.hold_row(session, job)  # two quality users issuing at once: the second sees the first
    historical = issued_at is not None
    issued_at = _moment(issued_at, "issued_at")
    # A valid certificate is named first: the second of two people issuing at once learns
    # which one the first issued, not only that the job is no longer in tolerance.
    earlier = job_certificates(session, job)
    existing = next((c for c in earlier if c.state == "issued"), None)
    if existing is not None:
        raise TransitionRefused(
            f"Job {job.number} already has certificate {existing.number} revision "
            f"{existing.revision}; reissue it instead."
        )
    if job.state not in CERTIFIABLE_STATES:
        raise TransitionRefused(
            f"Job {job.number} is {job.state.replace('_', ' ')}: only a job in tolerance can "
            "be certified."
        )
    ev = evidence(session, job, as_of=issued_at if historical else None)
    if earlier:
        # Certified again after rework: the next revision of the job's number.
        number, revision = earlier[0].number, earlier[0].revision + 1
        reason = certificate_link.reissue_reason(earlier[0])
    else:
        number, revision, reason = next_number(session, issued_at.year), 1, ""
    key = _signer(session, signing_dir, by)
    code = _fresh_code(session)
    data = build_data(session, ev, number=number, revision=revision, reason=reason,
                      issued_at=issued_at, issued_by=by, verification_code=code,
                      verify_url=verify_url(base, number, code),
                      signed_by=key.info.subject if key else "")
    cert = _store(session, data, job, by=by, issued_at=issued_at, key=key)
    job_states.mark_certified(session, job, by=by, at=issued_at if historical else None)
    _audit(session, by=by, entity_id=cert.id, action="issue", after=_summary(cert),
           job_id=job.id, at=issued_at if historical else None)
    return cert


def reissue(session: Session, certificate: Certificate, *, by: User, reason: str,
            issued_at: dt.datetime | None = None, signing_dir: Path | None = None,
            base_url: str = "") -> Certificate:
    """A new revision of ``certificate`` (same number, revision + 1) from the job's data now.

    The old revision is voided with "superseded by revision n". Only the latest
    revision of a certified or dispatched job can be reissued; the job must
    still meet every condition of :func:`issue` except its state.
    ``issued_at``, ``signing_dir``, ``base_url``: as for :func:`issue`; the new
    revision gets its own verification code.
    """
    require(by, "issue_certificates")
    text = _reason(reason)
    base = public_base(base_url)
    historical = issued_at is not None
    issued_at = _moment(issued_at, "issued_at")
    job = certificate.job
    locks.hold_row(session, job)
    session.refresh(certificate)
    latest = by_number(session, certificate.number)
    if latest.id != certificate.id:
        raise TransitionRefused(
            f"{certificate.number} revision {certificate.revision} is not the latest; "
            f"reissue revision {latest.revision}."
        )
    if job.state not in REISSUABLE_JOB_STATES:
        raise TransitionRefused(
            f"Job {job.number} is {job.state.replace('_', ' ')}: a certificate is reissued only "
            "for a certified or dispatched job (a reopened job is certified again with Issue)."
        )
    at = issued_at if historical else None
    ev = evidence(session, job, as_of=at)
    revision = certificate.revision + 1
    key = _signer(session, signing_dir, by)
    code = _fresh_code(session)
    data = build_data(session, ev, number=certificate.number, revision=revision, reason=text,
                      issued_at=issued_at, issued_by=by, verification_code=code,
                      verify_url=verify_url(base, certificate.number, code),
                      signed_by=key.info.subject if key else "")
    if certificate.state == "issued":
        _void(session, certificate, by=by, reason=certificate_link.superseded_reason(revision),
              at=at)
    cert = _store(session, data, job, by=by, issued_at=issued_at, key=key)
    _audit(session, by=by, entity_id=cert.id, action="reissue", before=_summary(certificate),
           after=_summary(cert), job_id=job.id, at=at)
    return cert


def void(session: Session, certificate: Certificate, *, by: User, reason: str,
         voided_at: dt.datetime | None = None) -> Certificate:
    """Void an issued certificate (quality only; reason required).

    A certified job whose only valid certificate this was goes back to
    ``in_tolerance`` (:func:`shopapp.jobs.states.certificate_voided`): it
    cannot be dispatched until a new revision is issued. Other job states are
    kept (a dispatched rotor has left; a reopened job is already on the machine).

    ``voided_at``: a past moment for historical records (default now); not
    before the certificate was issued.
    """
    require(by, "issue_certificates")
    text = _reason(reason)
    locks.hold_row(session, certificate.job)
    session.refresh(certificate)
    at = None
    if voided_at is not None:
        at = _moment(voided_at, "voided_at")
        if at < certificate.issued_at:
            raise ValidationFailed("voided_at", f"{at.isoformat()} is before the certificate "
                                   f"was issued ({certificate.issued_at.isoformat()})")
    _void(session, certificate, by=by, reason=text, at=at)
    job = certificate.job
    if job.state == "certified" and certificate_link.current_certificate(session, job) is None:
        job_states.certificate_voided(session, job, by=by, reason=f"certificate "
                                      f"{certificate.number} revision {certificate.revision} "
                                      f"voided: {text}", at=at)
    return certificate
