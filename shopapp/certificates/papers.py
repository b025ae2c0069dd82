"""The job traveller and the rotor tag of a job: their data, read from the job's records.

Read-only use-cases (role ``read``); the PDFs are drawn by
:mod:`shopapp.reports.job_papers`. The addresses come from the caller (the
route knows the job page's path and the shop's ``BASE_URL``).

- The traveller's QR code opens the job page (``<BASE_URL>/jobs/<id>``).
- The tag's QR code opens the certificate check (its verify address, no login
  needed: the tag travels to the customer with the rotor) when the job has a
  valid certificate that prints one; otherwise the job page.
"""

from __future__ import annotations

import datetime as dt

from sqlalchemy.orm import Session

from shopapp.balancing.dynamics import SPEED_CAUTION
from shopapp.core import display
from shopapp.core.clock import shop_date, shop_today
from shopapp.core.display import ShopDisplay
from shopapp.core.errors import TransitionRefused
from shopapp.core.permissions import require
from shopapp.core.settings import get_settings
from shopapp.jobs import calc as job_calc
from shopapp.jobs import queries as job_queries
from shopapp.jobs.certificate_link import current_certificate
from shopapp.models import Job, User
from shopapp.reports.certificate import CertificateData
from shopapp.reports.job_papers import TagData, TravellerData, has_qr

TAGGABLE_STATES = ("in_tolerance", "certified", "dispatched")


def _today(today: dt.date | None) -> str:
    return (today or shop_today()).isoformat()


def _speed_note(job: Job) -> str:
    machine = job.machine
    if machine is None:
        return ("No balancing machine is assigned yet: check the machine's speed limit and the "
                f"rotor's service speed ({display.quantity(job.service_speed_rpm, 'rpm')}) "
                "before the first run.")
    top = min(machine.max_speed_rpm, job.service_speed_rpm)
    return (f"Balance at {display.quantity(job.balancing_speed_rpm, 'rpm')}; never above "
            f"{display.quantity(top, 'rpm')} (the lower of the machine's limit and the rotor's "
            "service speed).")


def _safety_notes(job: Job, calc: job_calc.JobCalc) -> tuple[str, ...]:
    rt = job.rotor.rotor_type
    notes = [_speed_note(job)]
    if rt.first_critical_rpm is not None:
        notes.append(f"First bending critical speed "
                     f"{display.quantity(rt.first_critical_rpm, 'rpm')}.")
    for text in (*calc.warnings, *calc.cautions, SPEED_CAUTION):
        if text not in notes:
            notes.append(text)
    if rt.notes.strip():
        notes.append(f"Rotor type notes: {rt.notes.strip()}")
    return tuple(notes)


def traveller(session: Session, job: Job, *, by: User, job_url: str,
              today: dt.date | None = None) -> TravellerData:
    """The job traveller's data (printed at book-in, any state)."""
    require(by, "read")
    settings = get_settings(session)
    show = ShopDisplay(settings)
    calc = job_queries.evaluate(session, job)
    rt = job.rotor.rotor_type
    tol = calc.tolerance
    limits = tuple(f"plane {k + 1}: {display.quantity(show.unb(x), show.unit)}"
                   for k, x in enumerate(tol.plane_limits_gmm)) if tol else ()
    return TravellerData(
        shop_name=settings.shop_name,
        job_number=job.number,
        job_url=job_url,
        customer_name=job.customer.name,
        customer_order_ref=job.customer_order_ref,
        rotor_part_number=rt.part_number,
        rotor_description=rt.description,
        serial_number=job.rotor.serial_number,
        mass_kg=rt.mass_kg,
        planes=rt.planes,
        tolerance=tol.label if tol else calc.tolerance_error,
        plane_limits=limits,
        balancing_speed_rpm=job.balancing_speed_rpm,
        service_speed_rpm=job.service_speed_rpm,
        machine=job.machine.name if job.machine else "not assigned yet",
        received_on=job.received_on.isoformat(),
        promised_on=job.promised_on.isoformat() if job.promised_on else "",
        safety_notes=_safety_notes(job, calc),
        job_notes=job.notes,
        printed_on=_today(today),
    )


def _result_words(method: str, grade: float | None) -> str:
    if method == "grade" and grade is not None:
        return f"balanced to G {display.plain(grade)}"
    if method == "4w/n":
        return "balanced to 4W/N"
    return "balanced to customer limits"


def rotor_tag(session: Session, job: Job, *, by: User, job_url: str,
              size_mm: tuple[float, float], today: dt.date | None = None) -> TagData:
    """The rotor tag's data: from the job's valid certificate when there is one, else from
    the job's last passing check run. Refused for a job not (yet) in tolerance."""
    require(by, "read")
    if job.state not in TAGGABLE_STATES:
        raise TransitionRefused(
            f"Job {job.number} is {job.state.replace('_', ' ')}: the rotor tag states the "
            "balance result, so it is printed once the job is in tolerance."
        )
    settings = get_settings(session)
    cert = current_certificate(session, job)
    qr, caption = (job_url, "scan: job page") if has_qr(job_url) else ("", "")
    if cert is not None:
        data = CertificateData.from_json(cert.data_json)
        result = _result_words(data.tolerance_method, data.grade_mm_s)
        balanced_on = data.balanced_on
        certificate = f"certificate {data.number} rev {data.revision}"
        if has_qr(data.verify_url):
            qr, caption = data.verify_url, "scan: certificate check"
    else:
        result = _result_words(job.tolerance_method, job.tolerance_grade)
        calc = job_queries.evaluate(session, job)
        balanced_on = ""
        if calc.last_check is not None and calc.last_check.passed:
            run = next((r for r in job.runs if r.id == calc.last_check.run_id), None)
            if run is not None:
                balanced_on = shop_date(run.taken_at).isoformat()
        certificate = ""
    return TagData(
        shop_name=settings.shop_name, serial_number=job.rotor.serial_number,
        job_number=job.number, result=result, balanced_on=balanced_on,
        certificate=certificate, qr_text=qr, qr_caption=caption,
        width_mm=size_mm[0], height_mm=size_mm[1], printed_on=_today(today),
    )
