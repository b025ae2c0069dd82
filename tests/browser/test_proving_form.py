"""The proving-test form's script in a real browser: the claimed figures follow the rotor.

Figures by hand: claimed e_mar 0.2 g·mm/kg; a 3 kg one-plane rotor claims 0.6 g·mm for the
whole rotor, test mass 15 × 0.6 / 60 mm = 0.15 g; a 400 kg two-plane rotor claims 80 g·mm,
half per plane, 15 × 40 / 250 mm = 2.4 g (the ×15 proposal is the middle of the usual 10–20 ×,
common practice for the ISO 21940-21 test).
"""

from __future__ import annotations

from pathlib import Path

import pytest
from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.core.database import make_engine
from shopapp.models import Machine
from shopapp.traceability import verifications
from tests import factories
from tests.browser.conftest import PASSWORD, LiveShop

pytestmark = pytest.mark.browser


def test_changing_the_proving_rotor_updates_its_figures(live_shop: LiveShop, page,
                                                        tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    # The live shop's own database file (conftest): add a quality user and two proving rotors.
    engine = make_engine(f"sqlite:///{tmp_path / 'browser.sqlite3'}")
    with Session(engine) as sess:
        quality = factories.user(sess, username="quinn.browser", role="quality",
                                 password=PASSWORD)
        machine = sess.scalars(select(Machine)).one()
        machine.claimed_emar_gmm_per_kg = 0.2
        machine.min_mass_kg, machine.max_mass_kg = 100.0, 5000.0
        small = verifications.create_proving_rotor(sess, by=quality, name="PR-small",
                                                   mass_kg=3.0, planes=1, radius_1_mm=60.0,
                                                   positions=6)
        big = verifications.create_proving_rotor(sess, by=quality, name="PR-big", mass_kg=400.0,
                                                 planes=2, radius_1_mm=250.0, radius_2_mm=250.0,
                                                 positions=8)
        sess.commit()
        ids, machine_id = (small.id, big.id), machine.id
    engine.dispose()

    page.goto(live_shop.url + "/login")
    page.get_by_label("Username").fill("quinn.browser")
    page.get_by_label("Password").fill(PASSWORD)
    page.get_by_role("button", name="Log in").click()
    page.wait_for_url(live_shop.url + "/")
    page.goto(f"{live_shop.url}/traceability/machines/{machine_id}/proving-test")
    rotor = page.get_by_label("Proving rotor")
    assert rotor.input_value() == str(ids[1])  # the one in the 100–5000 kg range
    assert page.get_by_label("Claimed U_mar, whole rotor, g·mm").input_value() == "80"
    assert page.get_by_label("Test mass, each plane, g").input_value() == "2.4"
    rotor.select_option(str(ids[0]))
    assert page.get_by_label("Claimed U_mar, whole rotor, g·mm").input_value() == "0.6"
    assert page.get_by_label("Test mass, each plane, g").input_value() == "0.15"
    assert page.get_by_label("Test-mass radius, each plane, mm").input_value() == "60"
    assert page.locator("#figures_for").input_value() == str(ids[0])
