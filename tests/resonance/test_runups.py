"""Recording and analysing run-ups: every bad reading gets a message naming its line."""

from __future__ import annotations

import datetime as dt
import math
import re

import pytest
from sqlalchemy.exc import IntegrityError

from shopapp.balancing import runup as runup_numerics
from shopapp.core.errors import PermissionDenied, ValidationFailed
from shopapp.models import AuditEvent, RunUpPoint, RunUpRecord, ShopSettings
from shopapp.resonance import runups
from shopapp.resonance.forms import parse_points
from shopapp.resonance.runups import PointIn
from tests.resonance.synthetic import NC, jeffcott_lines

TODAY = dt.date(2026, 11, 20)


def _points(text: str) -> list[PointIn]:
    points, errors = parse_points(text)
    assert not errors, errors
    return points


def _record(db, by, job=None, machine=None, text=None, **kw):  # type: ignore[no-untyped-def]
    values = {"recorded_on": dt.date(2026, 11, 10), "sensor": "bearing A, horizontal",
              "measured": "displacement", "unit": "µm", "today": TODAY,
              "points": _points(text if text is not None else jeffcott_lines())}
    values.update(kw)
    return runups.record_run_up(db, by=by, job=job, machine=machine, **values)


def _refused(db, by, job, **kw) -> dict[str, str]:  # type: ignore[no-untyped-def]
    with pytest.raises(ValidationFailed) as info:
        _record(db, by, job, **kw)
    return info.value.errors


# --------------------------------------------------------------------------- the textarea


def test_separators_spaces_tabs_semicolons_and_commas() -> None:
    text = "600 1.5 10\n700\t2.5\t20\n800; 3.5; 30\n900, 4.5, 40\n\n# a comment\n1000 5 50\n"
    points, errors = parse_points(text)
    assert errors == []
    assert [(p.speed_rpm, p.amplitude, p.angle_deg, p.line) for p in points] == [
        (600.0, 1.5, 10.0, 1), (700.0, 2.5, 20.0, 2), (800.0, 3.5, 30.0, 3),
        (900.0, 4.5, 40.0, 4), (1000.0, 5.0, 50.0, 7)]


@pytest.mark.parametrize("line", ["700 2,5 20", "700;2,5;20", "700\t2,5\t20", "700, 2,5, 20"])
def test_decimal_comma_is_refused_naming_the_line(line: str) -> None:
    _, errors = parse_points(f"600 1.5 10\n{line}\n800 3 30")
    assert len(errors) == 1
    assert errors[0].startswith("line 2:") and "decimal comma" in errors[0]


@pytest.mark.parametrize("line, words", [
    ("700 2.5", "found 2"), ("700 2.5 20 9", "found 4"), ("700 abc 20", "'abc' is not a number"),
    ("700 nan 20", "'nan' is not allowed"), ("inf 2 20", "'inf' is not allowed"),
])
def test_bad_lines_get_their_own_message(line: str, words: str) -> None:
    _, errors = parse_points(f"600 1.5 10\n\n{line}")
    assert len(errors) == 1 and errors[0].startswith("line 3:") and words in errors[0]


# --------------------------------------------------------------------------- the use-case


def test_minimum_points_is_the_fits_minimum() -> None:
    assert runups.MIN_POINTS == runup_numerics.MIN_POINTS


def test_too_few_readings(db, shop, make_user) -> None:
    errors = _refused(db, make_user("operator"), shop.job(),
                      text="600 1 10\n700 2 20\n800 3 30\n900 4 40")
    assert errors == {"points": "at least 5 readings are needed to fit a resonance, got 4"}


@pytest.mark.parametrize("reading, words", [
    (PointIn(-700.0, 2.0, 20.0, line=2), "line 2: speed must be greater than 0 rpm"),
    (PointIn(0.0, 2.0, 20.0, line=2), "line 2: speed must be greater than 0 rpm"),
    (PointIn(math.nan, 2.0, 20.0, line=2), "line 2: speed must be a finite number"),
    (PointIn(700.0, math.inf, 20.0, line=2), "line 2: amplitude must be a finite number"),
    (PointIn(700.0, -2.0, 20.0, line=2), "line 2: amplitude must not be below 0"),
    (PointIn(700.0, 2.0, math.nan, line=2), "line 2: angle must be a finite number"),
])
def test_bad_reading_values_name_the_line(db, shop, make_user, reading, words) -> None:
    points = [PointIn(600.0, 1.0, 10.0, line=1), reading,
              *(PointIn(800.0 + 100 * k, 3.0, 30.0, line=3 + k) for k in range(4))]
    with pytest.raises(ValidationFailed) as info:
        runups.record_run_up(db, by=make_user("operator"), job=shop.job(),
                             recorded_on=TODAY, sensor="A", measured="displacement", unit="µm",
                             points=points, today=TODAY)
    assert info.value.errors["points.1"].startswith(words)
    assert db.query(RunUpRecord).count() == 0


def test_speed_above_the_machines_maximum(db, shop, make_user) -> None:
    machine = shop.machine(max_speed_rpm=2500.0)
    errors = _refused(db, make_user("operator"), shop.job(machine=machine))
    bad = [m for k, m in errors.items() if k.startswith("points.")]
    # jeffcott_lines runs 600…3000 rpm in 60 rpm steps: 2520…3000 rpm (lines 33–41) are too fast.
    assert len(bad) == 9
    assert bad[0] == f"line 33: speed 2520 rpm is above the maximum speed of {machine.name} " \
                     "(2500 rpm)"


@pytest.mark.parametrize("text, words", [
    ("600 1 10\n700 2 20\n650 3 30\n800 4 40\n900 5 50", "line 3 (650 rpm) does not follow "
     "line 2 (700 rpm)"),
    ("600 1 10\n700 2 20\n700 3 30\n800 4 40\n900 5 50", "line 3 repeats the speed of line 2"),
])
def test_speeds_must_rise_or_fall(db, shop, make_user, text, words) -> None:
    errors = _refused(db, make_user("operator"), shop.job(), text=text)
    assert errors["points"].startswith(words)


def test_a_coast_down_is_recorded_as_such(db, shop, make_user) -> None:
    lines = jeffcott_lines().splitlines()[::-1]
    done = _record(db, make_user("operator"), shop.job(), text="\n".join(lines))
    assert done.record.sweep == "coast_down"
    assert runups.sweep_words(done.record) == "coast-down (speeds falling)"
    assert done.record.points[0].speed_rpm == 3000.0


def test_angles_outside_a_turn_are_wrapped_with_a_note(db, shop, make_user) -> None:
    done = _record(db, make_user("operator"), shop.job(),
                   text="600 1 370\n700 2 -30\n800 3 30\n900 4 40\n1000 5 50")
    assert done.notes == ("line 1: angle 370° taken as 10°", "line 2: angle -30° taken as 330°")
    assert [p.angle_deg for p in done.record.points][:2] == [10.0, 330.0]


def test_angles_typed_in_the_shops_convention_are_stored_internally(db, shop,
                                                                    make_user) -> None:
    db.add(ShopSettings(id=1, angle_sense="against_rotation", angle_zero_deg=90.0))
    db.flush()
    done = _record(db, make_user("operator"), shop.job(),
                   text="600 1 10\n700 2 20\n800 3 30\n900 4 40\n1000 5 50")
    # Display θ against rotation from a zero at 90°: internal = 90° − θ (mod 360).
    assert [p.angle_deg for p in done.record.points] == [80.0, 70.0, 60.0, 50.0, 40.0]


@pytest.mark.parametrize("kw, field, words", [
    ({"operating_speed_rpm": 1500.0, "operating_lo_rpm": 1400.0, "operating_hi_rpm": 1600.0},
     "operating_speed_rpm", "not both"),
    ({"operating_lo_rpm": 1400.0}, "operating_hi_rpm", "give both ends"),
    ({"operating_lo_rpm": 1600.0, "operating_hi_rpm": 1400.0}, "operating_hi_rpm", "above the"),
    ({"operating_speed_rpm": math.nan}, "operating_speed_rpm", "finite"),
    ({"operating_speed_rpm": -1.0}, "operating_speed_rpm", "greater than 0"),
    ({"slow_roll_amplitude": 3.0}, "slow_roll_angle_deg", "together"),
    ({"slow_roll_amplitude": -3.0, "slow_roll_angle_deg": 10.0}, "slow_roll_amplitude",
     "below 0"),
    ({"unit": "mm/s"}, "unit", "not a unit of displacement"),
    ({"measured": "temperature"}, "measured", "must be one of"),
    ({"sensor": ""}, "sensor", "required"),
    ({"recorded_on": dt.date(2026, 12, 1)}, "recorded_on", "in the future"),
])
def test_other_fields_get_field_messages(db, shop, make_user, kw, field, words) -> None:
    errors = _refused(db, make_user("operator"), shop.job(), **kw)
    assert words in errors[field]


def test_a_run_up_belongs_somewhere(db, make_user) -> None:
    errors = _refused(db, make_user("operator"), None)
    assert "job or a machine" in errors["job"]


def test_owner_may_not_record(db, shop, make_user) -> None:
    with pytest.raises(PermissionDenied):
        _record(db, make_user("owner"), shop.job())


def test_recording_writes_an_audit_event(db, shop, make_user) -> None:
    job = shop.job()
    done = _record(db, make_user("quality"), job, operating_speed_rpm=2400.0)
    event = db.query(AuditEvent).filter_by(entity="run_up", entity_id=done.record.id).one()
    assert event.action == "record" and event.job_id == job.id
    assert event.after["points"] == 41 and event.after["operating_speed_rpm"] == 2400.0


# --------------------------------------------------------------------------- analysis


def test_analysis_finds_the_known_critical_speed_and_margin(db, shop, make_user) -> None:
    op = 2400.0
    user = make_user("operator")
    done = _record(db, user, shop.job(), operating_speed_rpm=op)
    a = runups.analyse_run_up(db, done.record, by=user)
    assert a.main is not None
    # Noise 0.2 µm on a peak of ~400 µm: the fit lands within 0.5 % of n_c and ζ within 5 %.
    assert a.main.critical_speed_rpm == pytest.approx(NC, rel=0.005)
    assert a.main.damping_ratio == pytest.approx(0.05, rel=0.05)
    # Separation margin relative to the operating speed: |n_op − n_c| / n_op (API 684 style).
    assert a.main.separation_margin_pct == pytest.approx(abs(op - NC) / op * 100.0, rel=0.02)
    assert a.verdict_state == "clear" and a.verdict.startswith("Clear: the critical speed 18")
    assert a.cautions and a.curves is not None


def test_operating_speed_near_the_resonance_is_too_close(db, shop, make_user) -> None:
    user = make_user("operator")
    done = _record(db, user, shop.job(), operating_speed_rpm=1900.0)
    a = runups.analyse_run_up(db, done.record, by=user)
    assert a.verdict_state == "too_close"
    assert re.match(r"Too close: the critical speed 1\d{3} rpm is only \d\.?\d? % from", a.verdict)


def test_a_record_the_fit_cannot_use_says_why(db, shop, make_user) -> None:
    user = make_user("operator")
    done = _record(db, user, shop.job(), text="600 0 0\n700 0 0\n800 0 0\n900 0 0\n1000 0 0")
    a = runups.analyse_run_up(db, done.record, by=user)
    assert a.verdict_state == "failed" and "all readings are zero" in a.verdict
    assert a.result is None and a.cautions


# --------------------------------------------------------------------------- the database


@pytest.mark.parametrize("field, value", [
    ("speed_rpm", 0.0), ("amplitude", -1.0), ("angle_deg", 360.0), ("angle_deg", -0.5)])
def test_database_refuses_impossible_points(db, shop, make_user, field, value) -> None:
    done = _record(db, make_user("operator"), shop.job())
    values = {"record_id": done.record.id, "seq": 99, "speed_rpm": 5000.0, "amplitude": 1.0,
              "angle_deg": 10.0, field: value}
    db.add(RunUpPoint(**values))
    with pytest.raises(IntegrityError):
        db.flush()
    db.rollback()


def test_database_refuses_a_run_up_of_nothing(db) -> None:
    db.add(RunUpRecord(recorded_on=TODAY, sensor="A", measured="displacement", unit="µm",
                       sweep="run_up"))
    with pytest.raises(IntegrityError):
        db.flush()
    db.rollback()
