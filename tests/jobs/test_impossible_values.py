"""Impossible derived values are refused, never stored (issue 12).

Before: a residual test's unbalance of ``inf``, a proving test's URR of ``-inf`` and a
balance-error estimate of 6.7e307 g·mm were stored on SQLite (and crashed PostgreSQL,
whose JSON type has no infinity: RFC 8259 section 6, "Numeric values that cannot be
represented ... such as Infinity and NaN are not permitted"); a proving test's start
angle of ``nan``/``inf``/``abc`` was stored as 0°. IEEE 754 doubles overflow to
infinity above about 1.8e308 (numpy ``finfo(float).max``, checked below), so products of
large but finite inputs become ``inf``. Each case is refused naming a field, and nothing
is written.
"""

from __future__ import annotations

import datetime as dt
import html
import math

import numpy as np
import pytest
from sqlalchemy import func, select

from shopapp.core import checks
from shopapp.core.errors import ValidationFailed
from shopapp.jobs import evidence, residual_tests
from shopapp.models import BalanceErrorEstimate, MachineVerification, ResidualTest
from shopapp.traceability import verifications

HUGE = 1e300  # finite; a product of two of them is not


def _count(db, model) -> int:  # type: ignore[no-untyped-def]
    return int(db.scalar(select(func.count()).select_from(model)))


@pytest.fixture()
def operator(make_user):  # type: ignore[no-untyped-def]
    return make_user("operator")


@pytest.fixture()
def quality(make_user):  # type: ignore[no-untyped-def]
    return make_user("quality")


@pytest.fixture()
def job(shop):  # type: ignore[no-untyped-def]
    return shop.job(state="on_machine", machine=shop.machine(), tolerance_method="4w/n",
                    tolerance_grade=None, journal_load_a_kg=60.0, journal_load_b_kg=60.0,
                    service_speed_rpm=1480.0)


def test_huge_squared_is_infinite_in_ieee_doubles() -> None:
    # numpy as the independent reference for the overflow the checks guard against.
    assert np.finfo(float).max == pytest.approx(1.7976931348623157e308)
    with np.errstate(over="ignore"):
        assert math.isinf(float(np.float64(HUGE) * np.float64(HUGE)))


@pytest.mark.parametrize(("value", "bad"), [
    (1.0, False), (-3.5e11, False), (math.inf, True), (-math.inf, True), (math.nan, True),
    (6.7e307, True), ([1.0, [2.0, math.inf]], True), ({"a": {"b": -math.inf}}, True),
    ("text", False), (None, False), (10**15, False),
])
def test_derived_refuses_what_cannot_be_a_shop_figure(value, bad) -> None:
    if bad:
        with pytest.raises(ValidationFailed) as err:
            checks.derived({"residual_gmm": value})
        assert err.value.field == "residual_gmm"
    else:
        checks.derived({"residual_gmm": value})


@pytest.mark.parametrize(("mass_g", "amp"), [(HUGE, 1.0), (1.0, HUGE), (HUGE, HUGE),
                                             (1e11, 1e11)])
def test_residual_test_with_overflowing_inputs_is_refused_and_not_stored(
        db, job, operator, mass_g, amp) -> None:  # type: ignore[no-untyped-def]
    n = 8
    amps = [amp * (1.0 + 0.5 * math.cos(math.radians(45.0 * k))) for k in range(n)]
    angs = [(45.0 * k) % 360 for k in range(n)]
    with pytest.raises(ValidationFailed):
        residual_tests.record_residual_test(
            db, job, by=operator, plane=1, test_mass_g=mass_g, positions=n, amplitudes=amps,
            angles_deg=angs, repeat_amplitude=amps[0], repeat_angle_deg=angs[0], unit="um",
            test_radius_mm=300.0)
    assert _count(db, ResidualTest) == 0


def test_balance_error_estimate_beyond_any_real_figure_is_refused(db, job, operator) -> None:  # type: ignore[no-untyped-def]
    runs = [[(6.7e307, 0.0), (1.0, 0.0)], [(-6.7e307, 0.0), (1.0, 0.0)],
            [(6.7e307, 180.0), (1.0, 0.0)]]
    runs = [[(abs(a), g) for a, g in r] for r in runs]
    with pytest.raises(ValidationFailed):
        evidence.record_error_estimate(db, job, by=operator, runs=runs)
    assert _count(db, BalanceErrorEstimate) == 0


@pytest.fixture()
def proving_rotor(db, quality):  # type: ignore[no-untyped-def]
    return verifications.create_proving_rotor(db, by=quality, name="PR-X", mass_kg=10.0,
                                              planes=1, radius_1_mm=100.0, positions=8)


def _indications(test_gmm: float = 40.0, n: int = 8) -> list[float]:
    # A perfect machine with a 1.2 g·mm residual at 70° (simulation, marked as such).
    theta = np.radians(np.arange(n) * 360.0 / n)
    z = 1.2 * np.exp(1j * math.radians(70.0)) + test_gmm * np.exp(1j * theta)
    return [float(v) for v in np.abs(z)]


def test_proving_test_urr_of_minus_infinity_is_refused(db, shop, quality, proving_rotor) -> None:  # type: ignore[no-untyped-def]
    m = shop.machine(claimed_emar_gmm_per_kg=0.5, claimed_urr_pct=90.0)
    with pytest.raises(ValidationFailed):
        verifications.record_proving_test(
            db, m, by=quality, performed_on=dt.date(2026, 11, 20), proving_rotor=proving_rotor,
            test_mass_g=0.4, test_radius_mm=100.0, indicated_gmm=[_indications()],
            urr_before_gmm=[1e-310], urr_after_gmm=[1e11])
    assert _count(db, MachineVerification) == 0


@pytest.mark.parametrize("start", ["nan", "inf", "-inf", "abc", math.nan, math.inf, 1e308])
def test_proving_test_start_angle_that_is_not_an_angle_is_refused_by_name(
        db, shop, quality, proving_rotor, start) -> None:  # type: ignore[no-untyped-def]
    m = shop.machine(claimed_emar_gmm_per_kg=0.5)
    with pytest.raises(ValidationFailed) as err:
        verifications.record_proving_test(
            db, m, by=quality, performed_on=dt.date(2026, 11, 20), proving_rotor=proving_rotor,
            test_mass_g=0.4, test_radius_mm=100.0, indicated_gmm=[_indications()],
            first_position_deg=start)
    assert "first_position_deg" in err.value.errors
    assert _count(db, MachineVerification) == 0


def test_proving_test_page_shows_the_start_angle_refusal(client, login_as, db, shop,
                                                          proving_rotor) -> None:  # type: ignore[no-untyped-def]
    login_as("quality")
    m = shop.machine(claimed_emar_gmm_per_kg=0.5)
    db.commit()
    data = {"performed_on": "2026-11-20", "proving_rotor_id": str(proving_rotor.id),
            "test_mass_g": "0.4", "test_radius_mm": "100", "first_position_deg": "nan",
            "save": "Save the test"}
    data.update({f"p1_amp-{k}": f"{v:.4f}" for k, v in enumerate(_indications())})
    resp = client.post(f"/traceability/machines/{m.id}/proving-test", data=data)
    assert resp.status_code == 422
    # Refused by the form's number parser, beside the field (as every number field).
    assert "'nan' is not allowed: type a finite number" in html.unescape(
        resp.get_data(as_text=True))
    assert _count(db, MachineVerification) == 0
