"""Do the stored certificates still hold what was certified? (``shopapp db check``)

The database refuses changes to certificates and to the evidence of certified jobs
(migration 0003), but a restored old backup, a file copied in by hand or someone
with the rights to drop a trigger could still leave a shop with certificates that
no longer agree with their own hashes or with the runs behind them. This check
reads everything back:

- every certificate: the SHA-256 of its stored certified data (canonical JSON) and
  of its PDF equal the stored hashes; the data reads back, is canonical and names
  the row's number and revision;
- every issued (valid) certificate: the certified data is derived again from the
  job's stored runs, readings and corrections (:func:`services.evidence` and
  :func:`services.build_data`, exactly as at issue) and the values that come from
  that evidence are compared with the certificate: the judged run, balancing speed
  and date, the verdict, the initial and residual unbalance per plane and every
  correction. Values that may change for honest reasons after issue (names,
  addresses, the rotor type's description and geometry, the tolerance's limits)
  are not compared. Angles and correction details are compared only while the
  shop's angle convention and unit are the ones printed on the certificate; the
  numbers in the details (split masses, drill depths) are compared as numbers to
  the precision printed, so a certificate issued before the split masses were
  printed with the job page's figures still agrees.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import re
from collections.abc import Iterator, Sequence
from dataclasses import dataclass

from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.certificates import issue as services
from shopapp.core.display import counted, plain
from shopapp.core.errors import TransitionRefused
from shopapp.models import Certificate, Job, User
from shopapp.reports import certificate as report
from shopapp.reports.certificate import CertificateData, CorrectionLine, PlaneVector

CHUNK = 50  # certificates read at a time (each carries its PDF)


@dataclass(frozen=True)
class Finding:
    """One thing about one certificate revision that does not agree."""

    number: str
    revision: int
    what: str

    def __str__(self) -> str:
        return f"{self.number} revision {self.revision}: {self.what}"


@dataclass(frozen=True)
class IntegrityReport:
    """What :func:`check_certificates` read and what it found."""

    certificates: int
    issued: int
    findings: tuple[Finding, ...]
    notes: tuple[str, ...] = ()

    @property
    def ok(self) -> bool:
        return not self.findings


def _short(digest: str) -> str:
    return digest[:16] + "…"


def _stored_checks(number: str, revision: int, data_json: str, data_sha: str, pdf: bytes,
                   pdf_sha: str) -> tuple[list[str], CertificateData | None]:
    """The hashes and the readability of one stored certificate."""
    out = []
    actual = hashlib.sha256(data_json.encode("utf-8")).hexdigest()
    if actual != data_sha:
        out.append(f"the certified data hashes to {_short(actual)}, the stored content hash "
                   f"(printed on the certificate) is {_short(data_sha)}")
    actual_pdf = hashlib.sha256(pdf).hexdigest()
    if actual_pdf != pdf_sha:
        out.append(f"the stored PDF hashes to {_short(actual_pdf)}, the stored PDF hash is "
                   f"{_short(pdf_sha)}")
    try:
        data = CertificateData.from_json(data_json)
    except (ValueError, TypeError, KeyError) as exc:
        out.append(f"the certified data cannot be read ({exc.__class__.__name__}: {exc})")
        return out, None
    if report.canonical_json(data) != data_json:
        out.append("the certified data is not in its canonical form (it was rewritten)")
    if (data.number, data.revision) != (number, revision):
        out.append(f"the certified data names {data.number} revision {data.revision}")
    return out, data


def _num(value: float | None, unit: str = "") -> str:
    if value is None:
        return "none"
    return f"{plain(value)}{(' ' + unit) if unit else ''}"


def _vector(v: PlaneVector | None, angles: bool) -> str:
    if v is None:
        return "none"
    text = _num(v.unbalance_gmm, "g·mm")
    return f"{text} at {plain(v.angle_deg)}°" if angles else text


def _vectors(name: str, certified: Sequence[PlaneVector], stored: Sequence[PlaneVector],
             angles: bool) -> list[str]:
    out = []
    a = {v.plane: v for v in certified}
    b = {v.plane: v for v in stored}
    for plane in sorted(set(a) | set(b)):
        x, y = a.get(plane), b.get(plane)
        same = (x is not None and y is not None and x.unbalance_gmm == y.unbalance_gmm
                and (not angles or x.angle_deg == y.angle_deg))
        if not same:
            out.append(f"{name} unbalance plane {plane}: certified {_vector(x, angles)}, the "
                       f"stored evidence gives {_vector(y, angles)}")
    return out


def _correction(c: CorrectionLine, angles: bool) -> str:
    text = f"plane {c.plane} {c.action} {_num(c.mass_g, 'g')} at radius {_num(c.radius_mm, 'mm')}"
    if angles:
        text += f", {plain(c.angle_deg)}°" + (f" ({c.details})" if c.details else "")
    return text


_NUMBER = re.compile(r"\d+(?:\.(\d+))?")


def _printed(text: str) -> tuple[list[str], list[tuple[float, float]]]:
    """The words of a printed detail and its numbers, each with its last digit's unit."""
    numbers = [(float(m.group(0)), 10.0 ** -len(m.group(1) or ""))
               for m in _NUMBER.finditer(text)]
    return _NUMBER.split(text)[::2], numbers


def same_printed_numbers(certified: str, derived: str) -> bool:
    """Whether two printed details say the same thing, number by number.

    The words must agree exactly; each number may differ by half a unit of the
    coarser of its two printed last digits, so a certificate that printed a split
    mass as ``4.3 g`` (the 0.1 g of older certificates) still agrees with the
    ``4.26 g`` printed now, while ``4.46 g`` does not. (``_NUMBER.split`` keeps the
    decimals group, hence every other piece is a word.)
    """
    words_a, nums_a = _printed(certified)
    words_b, nums_b = _printed(derived)
    if words_a != words_b or len(nums_a) != len(nums_b):
        return False
    # Both roundings of the same value lie within half a coarse unit of each other;
    # the 1e-9 absorbs the binary representation of the printed decimals.
    return all(abs(x - y) <= max(ux, uy) / 2 * (1 + 1e-9)
               for (x, ux), (y, uy) in zip(nums_a, nums_b, strict=True))


def _same_correction(x: CorrectionLine, y: CorrectionLine, angles: bool) -> bool:
    # Everything but the details as the finding prints it (six figures), as before.
    if _correction(x, False) != _correction(y, False):
        return False
    return not angles or (plain(x.angle_deg) == plain(y.angle_deg)
                          and same_printed_numbers(x.details, y.details))


def _corrections(certified: Sequence[CorrectionLine], stored: Sequence[CorrectionLine],
                 angles: bool) -> list[str]:
    if len(certified) == len(stored) and all(
            _same_correction(x, y, angles) for x, y in zip(certified, stored, strict=True)):
        return []
    a = [_correction(c, angles) for c in certified]
    b = [_correction(c, angles) for c in stored]
    if len(a) != len(b):
        return [f"corrections: {len(a)} certified, {len(b)} in the stored evidence "
                f"(certified: {'; '.join(a) or 'none'}; stored: {'; '.join(b) or 'none'})"]
    return [f"correction {k}: certified {x}, the stored evidence gives {y}"
            for k, (x, y, cx, cy) in enumerate(zip(a, b, certified, stored, strict=True),
                                               start=1)
            if not _same_correction(cx, cy, angles)]


#: The calendar day of one moment differs between the world's time zones (UTC−12 to
#: UTC+14, IANA tz database), so a day printed in any of them is that moment's day.
_EARLIEST_OFFSET = dt.timedelta(hours=-12)
_LATEST_OFFSET = dt.timedelta(hours=14)


def day_of_moment_somewhere(day: str, moment: dt.datetime) -> bool:
    """Whether ``day`` (ISO) is the calendar day of ``moment`` in some time zone.

    Certificates print the shop's day of the judged run (:mod:`shopapp.core.clock`);
    those issued before the shop's zone was known printed the UTC day, and a shop may set
    ``time_zone`` later. Neither is a change of the evidence.
    """
    try:
        start = dt.datetime.combine(dt.date.fromisoformat(day), dt.time(), tzinfo=dt.UTC)
    except ValueError:
        return False
    # Midnight at UTC+14 comes first, the next midnight at UTC−12 last.
    return start - _LATEST_OFFSET <= moment < start + dt.timedelta(days=1) - _EARLIEST_OFFSET


def evidence_differences(certified: CertificateData, derived: CertificateData,
                         judged_at: dt.datetime | None = None) -> list[str]:
    """What the evidence-derived values of ``derived`` change against ``certified``.

    ``judged_at``, the judged run's moment: the certified "balanced on" day agrees when it
    is that moment's day in some time zone (:func:`day_of_moment_somewhere`).
    """
    angles = (certified.angle_convention == derived.angle_convention
              and certified.unit == derived.unit)
    out = []
    same_day = (judged_at is not None and certified.final_run == derived.final_run
                and day_of_moment_somewhere(certified.balanced_on, judged_at))
    scalars = (
        ("judged run", certified.final_run, derived.final_run, ""),
        ("initial run", certified.initial_run, derived.initial_run, ""),
        ("balancing speed", certified.balancing_speed_rpm, derived.balancing_speed_rpm, "rpm"),
        ("balanced on", certified.balanced_on,
         certified.balanced_on if same_day else derived.balanced_on, ""),
        ("verdict", certified.passed, derived.passed, ""),
    )
    for name, x, y, unit in scalars:
        if x != y:
            shown = [_num(v, unit) if isinstance(v, float) else str(v) for v in (x, y)]
            out.append(f"{name}: certified {shown[0]}, the stored evidence gives {shown[1]}")
    out += _vectors("initial", certified.initial, derived.initial, angles)
    out += _vectors("residual", certified.residual, derived.residual, angles)
    out += _corrections(certified.corrections, derived.corrections, angles)
    return out


def _derived_checks(session: Session, cert: Certificate, data: CertificateData
                    ) -> tuple[list[str], bool]:
    """Differences between ``data`` and the data derived again from the job's evidence.

    The flag says whether angles could be compared (same display convention).
    """
    job = session.get(Job, cert.job_id)
    issuer = session.get(User, cert.issued_by_id)
    if job is None or issuer is None:
        return ["its job or its issuer is missing from the database"], True
    try:
        ev = services.evidence(session, job)
    except TransitionRefused as exc:
        return [f"the stored evidence no longer certifies the job: {exc.message}"], True
    derived = services.build_data(session, ev, number=cert.number, revision=cert.revision,
                                  reason=cert.reason, issued_at=cert.issued_at,
                                  issued_by=issuer)
    same_convention = (data.angle_convention == derived.angle_convention
                       and data.unit == derived.unit)
    return (evidence_differences(data, derived, ev.final_run.taken_at), same_convention)


def _chunks(ids: Sequence[int]) -> Iterator[Sequence[int]]:
    for i in range(0, len(ids), CHUNK):
        yield ids[i:i + CHUNK]


def check_certificates(session: Session) -> IntegrityReport:
    """Check every stored certificate (read only; see the module docstring)."""
    ids = list(session.scalars(
        select(Certificate.id).order_by(Certificate.number, Certificate.revision)
    ))
    findings: list[Finding] = []
    issued = 0
    angles_skipped = 0
    for chunk in _chunks(ids):
        rows = session.execute(
            select(Certificate.id, Certificate.number, Certificate.revision, Certificate.state,
                   Certificate.data_json, Certificate.data_sha256, Certificate.pdf,
                   Certificate.pdf_sha256)
            .where(Certificate.id.in_(chunk))
            .order_by(Certificate.number, Certificate.revision)
        ).all()
        for cid, number, revision, state, data_json, data_sha, pdf, pdf_sha in rows:
            problems, data = _stored_checks(number, revision, data_json, data_sha, pdf, pdf_sha)
            if state == "issued":
                issued += 1
                if data is not None:
                    cert = session.get(Certificate, cid)
                    assert cert is not None
                    more, compared = _derived_checks(session, cert, data)
                    problems += more
                    angles_skipped += 0 if compared else 1
            findings += [Finding(number, revision, p) for p in problems]
        session.expunge_all()  # nothing is written; keep memory flat over a long register
    notes = []
    if angles_skipped:
        notes.append("angles and correction details were not compared on "
                     f"{counted(angles_skipped, 'valid certificate')}: the shop's angle "
                     "convention or unit changed after they were issued")
    return IntegrityReport(len(ids), issued, tuple(findings), tuple(notes))

