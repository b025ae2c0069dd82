"""Resonance pages: log a run-up, view it, the job and machine panels, the calculator."""

from __future__ import annotations

import datetime as dt
import re

import pytest
from flask import render_template
from flask_login import login_user

from shopapp.models import RunUpRecord
from shopapp.resonance import samples
from shopapp.resonance.forms import TYRE_BEAD_EXAMPLE
from tests.resonance.synthetic import NC, jeffcott_lines

CAUTION_WORDS = "(over-speed)"


@pytest.fixture()
def job(db, shop):  # type: ignore[no-untyped-def]
    machine = shop.machine(max_speed_rpm=4000.0)
    j = shop.job(machine=machine, service_speed_rpm=2400.0)
    db.commit()
    return j


def _form(**kw: str) -> dict[str, str]:
    data = {"recorded_on": "2026-11-10", "sensor": "bearing A, horizontal",
            "measured": "displacement", "unit": "µm", "points": jeffcott_lines(),
            "operating_speed_rpm": "2400"}
    data.update(kw)
    return data


def _critical_speed(page: str) -> float:
    match = re.search(r'id="critical-speed">(\d+) rpm<', page)
    assert match, page[:2000]
    return float(match.group(1))


def test_operator_logs_a_run_up_and_sees_the_critical_speed(client, login_as, job, db) -> None:
    login_as("operator")
    assert client.get(f"/resonance/jobs/{job.id}/run-ups/new").status_code == 200
    resp = client.post(f"/resonance/jobs/{job.id}/run-ups/new", data=_form())
    assert resp.status_code == 302, resp.get_data(as_text=True)[:3000]
    page = client.get(resp.headers["Location"]).get_data(as_text=True)
    # Synthetic Jeffcott record with a known critical speed (textbook response, see
    # tests/resonance/synthetic.py): the page shows the fitted one within 0.5 %.
    assert _critical_speed(page) == pytest.approx(NC, rel=0.005)
    assert "Bode plot" in page and "Polar (Nyquist) plot" in page and page.count("<svg") == 2
    assert "Clear" in page and "run-up (speeds rising)" in page
    assert page.count(CAUTION_WORDS) == 1  # the cautions, once per page
    rec = db.query(RunUpRecord).one()
    assert rec.job_id == job.id and rec.machine_id == job.machine_id and len(rec.points) == 41


def test_bad_lines_are_shown_beside_the_readings_and_nothing_is_stored(client, login_as, job,
                                                                       db) -> None:
    login_as("operator")
    text = "600 1.5 10\n700 2,5 20\n800 3 30\n900 abc 40\n1000 5 50\n1100 6 60"
    resp = client.post(f"/resonance/jobs/{job.id}/run-ups/new",
                       data=_form(points=text, operating_speed_rpm="nan"))
    page = resp.get_data(as_text=True)
    assert resp.status_code == 422
    assert "line 2: &#39;700 2,5 20&#39; has a decimal comma" in page
    assert "line 4: &#39;abc&#39; is not a number" in page
    assert "type a finite number" in page  # the operating speed field
    assert db.query(RunUpRecord).count() == 0


def test_use_case_messages_go_beside_the_readings(client, login_as, job, db) -> None:
    login_as("operator")
    text = "600 1 10\n700 2 20\n-800 3 30\n900 4 40\n1000 5 50"
    resp = client.post(f"/resonance/jobs/{job.id}/run-ups/new", data=_form(points=text))
    page = resp.get_data(as_text=True)
    assert resp.status_code == 422
    assert "line 3: speed must be greater than 0 rpm" in page
    assert db.query(RunUpRecord).count() == 0


def test_wrapped_angles_are_reported(client, login_as, job) -> None:
    login_as("quality")
    text = "\n".join(["600 1 370", *jeffcott_lines(lo=700.0).splitlines()])
    resp = client.post(f"/resonance/jobs/{job.id}/run-ups/new", data=_form(points=text),
                       follow_redirects=True)
    assert resp.status_code == 200
    assert "line 1: angle 370° taken as 10°" in resp.get_data(as_text=True)


def test_owner_may_view_but_not_record(client, login_as, job, db, make_user) -> None:
    operator = make_user("operator")
    rec = samples.add_sample_run_up(db, job, by=operator, recorded_on=dt.date(2026, 11, 5))
    db.commit()
    login_as("owner")
    assert client.get(f"/resonance/jobs/{job.id}/run-ups/new").status_code == 403
    assert client.post(f"/resonance/jobs/{job.id}/run-ups/new", data=_form()).status_code == 403
    assert client.get(f"/resonance/machines/{job.machine_id}/run-ups/new").status_code == 403
    assert client.get(f"/resonance/run-ups/{rec.id}").status_code == 200
    assert client.get("/resonance/").status_code == 200
    assert db.query(RunUpRecord).count() == 1


def test_machine_run_up_and_unknown_ids(client, login_as, shop, db) -> None:
    machine = shop.machine(max_speed_rpm=4000.0)
    db.commit()
    login_as("quality")
    resp = client.post(f"/resonance/machines/{machine.id}/run-ups/new",
                       data=_form(operating_speed_rpm=""))
    assert resp.status_code == 302
    page = client.get(resp.headers["Location"]).get_data(as_text=True)
    assert "No operating speed given" in page
    assert client.get("/resonance/run-ups/999999").status_code == 404
    assert client.get("/resonance/jobs/999999/run-ups/new").status_code == 404


def test_the_sample_run_up_has_its_documented_critical_speed(db, job, make_user) -> None:
    user = make_user("operator")
    rec = samples.add_sample_run_up(db, job, by=user)
    from shopapp.resonance import runups

    a = runups.analyse_run_up(db, rec, by=user)
    # add_sample_run_up puts n_c at 70 % of the service speed (its docstring).
    assert a.main is not None
    assert a.main.critical_speed_rpm == pytest.approx(0.7 * job.service_speed_rpm, rel=0.01)
    assert a.verdict_state == "clear"


@pytest.mark.parametrize("role, may_record", [("operator", True), ("owner", False)])
def test_job_and_machine_panels(app, db, job, make_user, role, may_record) -> None:
    rec = samples.add_sample_run_up(db, job, by=make_user("operator"))
    db.commit()
    viewer = make_user(role)
    with app.test_request_context():
        login_user(viewer)
        html = render_template("resonance/_job_panel.html", job=job)
        machine_html = render_template("resonance/_machine_panel.html", machine=job.machine)
    for page in (html, machine_html):
        assert 'id="resonance"' in page and f"/resonance/run-ups/{rec.id}" in page
        assert "1680 rpm" in page  # 70 % of 2400 rpm, the sample's critical speed
        assert "Clear" in page and page.count("licensed practice") == 1
        assert ("Log a run-up" in page) is may_record


def test_panel_without_run_ups(app, db, shop, make_user) -> None:
    j = shop.job()
    with app.test_request_context():
        login_user(make_user("operator"))
        html = render_template("resonance/_job_panel.html", job=j)
    assert "No run-up recorded for this job." in html


# --------------------------------------------------------------------------- calculator


def test_calculator_form_shows_cautions(client, login_as) -> None:
    login_as("owner")
    resp = client.get("/resonance/loose-mass")
    page = resp.get_data(as_text=True)
    assert resp.status_code == 200 and "Rotor mass, kg" in page
    assert page.count("keep clear of the plane of rotation") == 1


def test_tyre_beads_settle_above_wheel_hop(client, login_as) -> None:
    login_as("operator")
    resp = client.get("/resonance/loose-mass", query_string=TYRE_BEAD_EXAMPLE)
    page = resp.get_data(as_text=True)
    assert resp.status_code == 200, page[:3000]
    # Common practice (no source): beads in a car tyre settle above the wheel-hop
    # resonance of the suspension, about 10–15 rev/s, and balance at highway speed.
    match = re.search(r"Settles above (\d+) rpm", page)
    assert match
    assert 10.0 <= float(match.group(1)) / 60.0 <= 15.0
    assert "It balances at 1150 rpm" in page and "Capacity 3.0× the unbalance" in page
    assert "below that it makes the unbalance worse" in page and "scan stopped" in page
    assert page.count("<svg") == 2 and "Where the balancer settles" in page


@pytest.mark.parametrize("change, words", [
    ({"ball_count": "13"}, "must be at most 12"),
    ({"speed_rpm": "nan"}, "type a finite number"),
    ({"speed_rpm": "200000"}, "must be at most 100000 rpm"),
    ({"speed_rpm": "9000"}, "at most 8 × the support&#39;s natural frequency"),
    ({"damping_ratio": "0.001"}, "must not be below 0.02"),
    ({"eccentricity_um": "300"}, "give the unbalance or the eccentricity"),
    ({"race_radius_mm": "-3"}, "must be greater than 0 mm"),
    ({"ramp_time_s": "60"}, "at most 16.7 s"),
])
def test_calculator_refuses_bad_input_by_field(client, login_as, change, words) -> None:
    login_as("operator")
    resp = client.get("/resonance/loose-mass", query_string={**TYRE_BEAD_EXAMPLE, **change})
    page = resp.get_data(as_text=True)
    assert resp.status_code == 422
    assert words in page, re.findall(r'class="error"[^>]*>([^<]*)<', page)


def test_calculator_capacity_too_small(client, login_as) -> None:
    login_as("operator")
    resp = client.get("/resonance/loose-mass",
                      query_string={**TYRE_BEAD_EXAMPLE, "ball_count": "2"})
    page = resp.get_data(as_text=True)
    assert resp.status_code == 200
    assert "It cannot balance this rotor" in page and "3000 g·mm" in page


def test_a_run_up_without_result_still_has_a_page(client, login_as, job) -> None:
    login_as("operator")
    text = "600 0 0\n700 0 0\n800 0 0\n900 0 0\n1000 0 0"
    resp = client.post(f"/resonance/jobs/{job.id}/run-ups/new", data=_form(points=text),
                       follow_redirects=True)
    page = resp.get_data(as_text=True)
    assert resp.status_code == 200
    assert "No result: all readings are zero." in page and "<svg" not in page
    assert page.count(CAUTION_WORDS) == 1
    assert not re.search(r"\b(nan|inf)\b", page, re.IGNORECASE)
