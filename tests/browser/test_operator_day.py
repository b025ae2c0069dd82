"""An operator's day at the machine, in a real browser.

The readings come from a known linear plant ``V = A·U`` (reading µm per gram
at the correction radius; the influence-coefficient model of balancing
texts, e.g. Rao, *Mechanical Vibrations*, balancing of rotating machines —
from memory). With the hidden initial unbalance ``U0`` the exact two-plane
correction is ``W = −U0``; the check run after fitting what the page advised
is ``V0 + A·W_applied``, so it passes when the page's advice is right.
"""

from __future__ import annotations

import cmath
import math
import re

import pytest

from tests.browser.conftest import LiveShop

pytestmark = pytest.mark.browser

# The plant (µm per gram at 300 mm) and the rotor's hidden unbalance (grams at 300 mm).
A = ((cmath.rect(0.80, math.radians(30)), cmath.rect(0.25, math.radians(-40))),
     (cmath.rect(0.20, math.radians(200)), cmath.rect(0.70, math.radians(60))))
U0 = (cmath.rect(40.0, math.radians(70)), cmath.rect(25.0, math.radians(250)))
TRIAL_G = 50.0
TRIAL_ANGLE = {1: 0.0, 2: 90.0}


def _reading(u: tuple[complex, complex]) -> tuple[complex, complex]:
    return (A[0][0] * u[0] + A[0][1] * u[1], A[1][0] * u[0] + A[1][1] * u[1])


def _amp_ang(v: complex) -> tuple[str, str]:
    return f"{abs(v):.4f}", f"{math.degrees(cmath.phase(v)) % 360.0:.2f}"


def _log_run(page, purpose: str, v: tuple[complex, complex], trial: int | None = None,
             radius_mm: float = 300.0) -> None:  # type: ignore[no-untyped-def]
    form = page.locator("#add-run form")
    form.get_by_label("Purpose").select_option(purpose)
    form.get_by_label("Reading unit").select_option("um")
    for plane in (1, 2):
        amp, ang = _amp_ang(v[plane - 1])
        form.get_by_label(f"Plane {plane} amplitude").fill(amp)
        form.get_by_label(f"Plane {plane} angle (°)").fill(ang)
    if trial is None:
        # The form prefills the trial radius from the rotor type; left there, it does not
        # make an initial or check run a trial run.
        assert form.get_by_label("Trial mass radius (mm)").input_value() != ""
    else:
        form.get_by_label("Trial mass in plane").select_option(str(trial))
        form.get_by_label("Trial mass (g)").fill(f"{TRIAL_G:g}")
        form.get_by_label("Trial mass angle (°)").fill(f"{TRIAL_ANGLE[trial]:g}")
        form.get_by_label("Trial mass radius (mm)").fill(f"{radius_mm:g}")
    form.get_by_role("button", name="Log run").click()
    page.wait_for_load_state()
    assert page.locator("small.error, #page-error").count() == 0, page.inner_text("main")


def _fits_width(page, what: str) -> None:  # type: ignore[no-untyped-def]
    """No horizontal overflow: the document is no wider than the viewport."""
    widths = page.evaluate("() => [document.documentElement.scrollWidth, window.innerWidth]")
    assert widths[0] <= widths[1], f"{what}: content {widths[0]} px wide in a {widths[1]} px view"


# Desktop, a tablet held in landscape (800 px) and a phone (390 px): the shop floor uses all.
@pytest.mark.parametrize("width", [1280, 800, 390])
def test_operator_books_in_balances_and_reaches_tolerance(live_shop: LiveShop, page, tmp_path,
                                                          width: int) -> None:  # type: ignore[no-untyped-def]
    shop = live_shop
    page.set_viewport_size({"width": width, "height": 1800})
    page.goto(shop.url + "/login")
    page.get_by_label("Username").fill(shop.username)
    page.get_by_label("Password").fill(shop.password)
    page.get_by_role("button", name="Log in").click()
    page.wait_for_url(shop.url + "/")

    # Book the rotor in.
    page.goto(shop.url + "/jobs/new")
    intake = page.locator("form").filter(has=page.get_by_role("button", name="Book in"))
    # The look-up form above has its own ids (prefix "lookup-"), so labels point at the
    # intake form's own inputs; no id on the page is used twice.
    ids = page.eval_on_selector_all("[id]", "els => els.map(e => e.id)")
    assert len(ids) == len(set(ids)), sorted({i for i in ids if ids.count(i) > 1})
    types = intake.get_by_label("Rotor type (customer · part number)")
    assert types.locator("option").count() == 1  # no customer chosen: no rotor types yet
    intake.get_by_label("Customer", exact=True).select_option(label=shop.customer)
    intake.get_by_label("Serial number", exact=True).fill("FFW-0001")
    # The list now holds this customer's types only (intake.js), not the other customer's.
    offered = types.locator("option").evaluate_all("os => os.map(o => o.value)")
    assert str(shop.rotor_type_id) in offered and str(shop.other_rotor_type_id) not in offered
    types.select_option(str(shop.rotor_type_id))
    intake.get_by_label("Balancing speed (rpm)").fill("600")
    intake.get_by_label("Machine", exact=True).select_option(str(shop.machine_id))
    intake.get_by_role("button", name="Book in").click()
    page.wait_for_url(re.compile(r".*/jobs/\d+$"))
    assert "booked in" in page.locator("h1").inner_text()
    _fits_width(page, "job page")

    # Initial run and one trial run per plane (each trial mass removed before the next).
    v0 = _reading(U0)
    _log_run(page, "initial", v0)
    for plane in (1, 2):
        t = cmath.rect(TRIAL_G, math.radians(TRIAL_ANGLE[plane]))
        u = (U0[0] + t, U0[1]) if plane == 1 else (U0[0], U0[1] + t)
        _log_run(page, "trial", _reading(u), trial=plane, radius_mm=shop.radius_mm)

    # The suggested correction: the exact answer is W = −U0 (the rotor's unbalance, opposite).
    advice = page.locator("#advice")
    assert advice.is_visible()
    applied = []
    for plane in (1, 2):
        rec = page.locator(f"#record-{plane}")
        mass = float(rec.get_by_label("Mass (g)").input_value())
        angle = float(rec.get_by_label("Angle (°)").input_value())
        want = -U0[plane - 1]
        assert mass == pytest.approx(abs(want), rel=2e-3)
        assert abs((angle - math.degrees(cmath.phase(want)) + 180.0) % 360.0 - 180.0) < 0.5
        applied.append(cmath.rect(mass, math.radians(angle)))
        rec.get_by_role("button", name=f"Record plane {plane}").click()
        page.wait_for_load_state()
        assert page.locator("small.error, #page-error").count() == 0, page.inner_text("main")

    # Check run after fitting exactly what was recorded.
    u1 = (U0[0] + applied[0], U0[1] + applied[1])
    _log_run(page, "check", _reading(u1))
    verdicts = page.locator("#verdicts")
    assert "in tolerance" in verdicts.locator("h3").last.inner_text()
    page.get_by_role("button", name="Mark in tolerance").click()
    page.wait_for_load_state()

    heading = page.locator("h1").inner_text()
    assert "in tolerance" in heading
    assert page.locator("#polar svg").count() == 2  # one polar plot per correction plane
    page.screenshot(path=str(tmp_path / "operator-day.png"), full_page=True)
    assert (tmp_path / "operator-day.png").stat().st_size > 10_000
    body = page.inner_text("main")
    assert "Run 4 (check): in tolerance" in body
    assert "FFW-0001" in body
    _fits_width(page, "job page with runs, advice and plots")
    job_url = page.url
    page.goto(shop.url + "/jobs")
    assert page.locator("table").get_by_text("FFW-0001").count() == 1
    _fits_width(page, "job list")
    page.goto(job_url)
