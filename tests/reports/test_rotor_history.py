"""Rotor history: the growth rule, the visits of a serial, the rotor-type distribution, the PDFs."""

from __future__ import annotations

import io

import pypdf
import pytest

from shopapp.certificates import issue as certificates
from shopapp.core.errors import NotFound, ValidationFailed
from shopapp.jobs import rotor_history
from shopapp.jobs.queries import evaluate
from shopapp.jobs.runs import record_run
from shopapp.jobs.states import dispatch, open_return
from shopapp.reports import rotor_history as report
from shopapp.reports.rotor_history import Visit
from tests.reports.samples import job_ready_for_certificate


def _visit(day: str, initial: tuple[float | None, ...], **kw: object) -> Visit:
    values: dict[str, object] = dict(
        job_number=f"J-{day}", kind="new", return_of="", received_on=day, finished_on="",
        state="dispatched", reopen_count=0, rework=False, initial_gmm=initial,
        initial_pct=tuple(None if u is None else u / 20.0 for u in initial),
        residual_pct=(30.0,) * len(initial), passed=True, corrections=2, correction_steps=1,
        correction_mass_g=(10.0,) * len(initial), certificate="")
    values.update(kw)
    return Visit(**values)  # type: ignore[arg-type]


def _pdf_text(pdf: bytes) -> str:
    return "\n".join(p.extract_text() for p in pypdf.PdfReader(io.BytesIO(pdf)).pages)


def test_growth_note_when_three_visits_rise_by_ten_percent_each() -> None:
    visits = [_visit("2024-01-10", (900.0, 800.0)), _visit("2025-01-10", (1000.0, 700.0)),
              _visit("2026-01-10", (1100.0, 750.0))]
    note = rotor_history.growth_note(visits)
    assert "plane 1 (900 → 1000 → 1100 g·mm" in note
    assert "plane 2" not in note and "telling the customer" in note


@pytest.mark.parametrize("values", [
    (900.0, 1000.0),  # only two visits
    (900.0, 1000.0, 1050.0),  # last rise below 10 %
    (900.0, 1200.0, 1000.0),  # fell at the last visit
])
def test_no_growth_note_otherwise(values) -> None:  # type: ignore[no-untyped-def]
    visits = [_visit(f"202{k}-01-10", (v,)) for k, v in enumerate(values)]
    assert rotor_history.growth_note(visits) == ""


def test_missing_initial_values_are_skipped_by_the_rule() -> None:
    visits = [_visit("2023-01-10", (500.0,)), _visit("2024-01-10", (None,)),
              _visit("2025-01-10", (600.0,)), _visit("2026-01-10", (700.0,))]
    assert "500 → 600 → 700" in rotor_history.growth_note(visits)


def test_history_pdf_lists_visits_marks_and_the_note() -> None:
    visits = (_visit("2024-01-10", (900.0, 800.0)),
              _visit("2025-01-10", (1000.0, 700.0), kind="return", return_of="J-2024-01-10",
                     rework=True),
              _visit("2026-01-10", (1100.0, 750.0), reopen_count=1, rework=True,
                     certificate="BC-2026-00003 rev 2 (valid)"))
    data = report.RotorHistoryData(
        shop_name="Northgate Rotor Works", generated_at="2026-11-05T10:00:00+00:00",
        customer_name="Harbourside Air Handling Ltd", serial_number="SN-4471",
        rotor_part_number="FAN-710", rotor_description="fan impeller", planes=2, visits=visits,
        growth_note=rotor_history.growth_note(visits), growth_rule=report.GROWTH_RULE)
    pdf = report.render(data)
    assert pdf == report.render(data)
    text = _pdf_text(pdf)
    for words in ("Rotor history · serial SN-4471", "return of J-2024-01-10", "reopened ×1",
                  "BC-2026-00003 rev 2 (valid)", "Initial unbalance per visit",
                  "Residual after balancing", "2025-01-10 R", "2026-01-10 W", "page 1 of"):
        assert words in text, words
    assert "grown at each of the last visits" in text.replace("\n", " ")


def test_history_of_a_rotor_from_its_jobs(db, shop, make_user) -> None:
    operator, quality = make_user("operator"), make_user("quality")
    job = job_ready_for_certificate(db, shop, operator)
    cert = certificates.issue(db, job, by=quality)
    dispatch(db, job, by=operator, on=job.received_on)
    again = open_return(db, by=operator, earlier_job=job, received_on=job.received_on)
    data = rotor_history.build(db, job.rotor)
    assert [v.job_number for v in data.visits] == [job.number, again.number]
    first, second = data.visits
    # The initial run read 9000 g·mm in plane 1 (calibrated machine): the history says so.
    assert first.initial_gmm[0] == pytest.approx(9000.0)
    assert first.passed is True and first.correction_steps == 2
    assert first.certificate == f"{cert.number} rev 1 (valid)"
    assert second.kind == "return" and second.rework and second.return_of == job.number
    assert second.initial_gmm == (None, None)  # no runs yet
    text = _pdf_text(report.render(data))
    assert job.rotor.serial_number in text and job.number in text


def test_find_rotor_needs_the_customer_when_the_serial_is_shared(db, shop) -> None:
    a, b = shop.customer(name="Alder Pumps"), shop.customer(name="Birch Fans")
    shop.rotor(shop.rotor_type(a), serial_number="SN-1")
    shop.rotor(shop.rotor_type(b), serial_number="SN-1")
    with pytest.raises(ValidationFailed, match="customer: serial 'SN-1' belongs to several"):
        rotor_history.find_rotor(db, "SN-1")
    assert rotor_history.find_rotor(db, "SN-1", customer="birch fans").customer.name == "Birch Fans"
    with pytest.raises(NotFound, match="no rotor with serial 'SN-2'"):
        rotor_history.find_rotor(db, "SN-2")


def test_rotor_type_distribution(db, shop, make_user) -> None:
    operator = make_user("operator")
    job = job_ready_for_certificate(db, shop, operator)
    rt = job.rotor.rotor_type
    other = shop.job(shop.rotor(rt), machine_id=job.machine_id)
    record_run(db, other, by=operator, purpose="initial", speed_rpm=600.0,
               readings=[(1, 1000.0, 10.0, "g·mm"), (2, 500.0, 20.0, "g·mm")])
    data = rotor_history.build_for_type(db, rt)
    assert data.jobs == 2 and len(data.serials) == 2
    # Plane 1 limit is the correction-plane limit from the ISO allocation; 9000 g·mm is
    # several times it, 1000 g·mm is below it (values chosen for that, see samples).
    limit_1 = evaluate(db, job).tolerance.plane_limits_gmm[0]
    assert 1000.0 < limit_1 < 9000.0 / 3.0
    counts = {b.label: b.count for b in data.initial_pct_bins[0]}
    assert counts["0–100 %"] == 1 and sum(counts.values()) == 2
    assert data.initial_median_gmm[0] == pytest.approx((9000.0 + 1000.0) / 2)
    cycles = {b.label: b.count for b in data.cycle_bins}
    assert cycles["0"] == 1 and cycles["2"] == 1
    text = _pdf_text(report.render_type(data))
    assert f"Rotor type history · {rt.part_number}" in text
    assert "Correction steps to reach tolerance" in text
