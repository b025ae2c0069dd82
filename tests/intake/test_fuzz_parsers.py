"""The run-file readers under hypothesis: any bytes give rows or a refusal (never a crash,
NaN or an angle outside a turn); any valid run written in our format or in a machine's
layout reads back as the same run; a refused file writes nothing.

The draws are derandomized and bounded (``SHOPAPP_INTAKE_FUZZ_EXAMPLES``, default 150)
so CI is stable. "Bad input is a message, never a crash" is common practice, no source.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from shopapp.core.errors import ValidationFailed
from shopapp.intake import files, imports
from shopapp.models import AuditEvent, ImportedFile, Run

EXAMPLES = int(os.environ.get("SHOPAPP_INTAKE_FUZZ_EXAMPLES", "150"))
FUZZ = settings(max_examples=EXAMPLES, derandomize=True, deadline=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture,
                                       HealthCheck.too_slow])

CELLS = st.one_of(
    st.text(max_size=12),
    st.sampled_from(["", "nan", "NaN", "inf", "-Infinity", "1e309", "1_5", "1,500", "12,5",
                     "12.5", "-0", "360", "360.0001", "-1", "0x10", "١٢", "½", "g·mm", "µm",
                     "initial", "check", "trial", "2026-11-03T09:15:00", "9999-12-31",
                     "\x00", "\ufeff", '"', "a;b", "a,b", "\r"]),
)


def _check_rows(parsed: files.ParsedFile) -> None:
    for row in parsed.rows:
        if not row.ok:
            assert all(isinstance(e, str) and e for e in row.errors)
            continue
        for name in files.NUMBER_FIELDS:
            value = row.values.get(name)
            if value is not None:
                assert math.isfinite(value), (name, value)
        for name in files.ANGLE_FIELDS:
            value = row.values.get(name)
            if value is not None:
                assert 0.0 <= value < 360.0, (name, value)  # normalised to one turn


@FUZZ
@given(st.binary(max_size=600))
def test_any_bytes_are_rows_or_a_refusal(data: bytes) -> None:
    for read in (files.parse_exchange,
                 lambda d: files.parse_csv(d, files.Layout(delimiter=";", decimal_mark=",",
                                                           skip_rows=1, encoding="cp1252"))):
        try:
            _check_rows(read(data))
        except ValidationFailed as exc:
            assert exc.field == "file" and exc.message


@FUZZ
@given(st.lists(st.lists(CELLS, min_size=0, max_size=18), min_size=1, max_size=6),
       st.sampled_from([",", ";"]), st.sampled_from([".", ","]))
def test_any_csv_cells_are_rows_or_a_refusal(lines: list[list[str]], delimiter: str,
                                             decimal_mark: str) -> None:
    out = io.StringIO()
    writer = csv.writer(out, delimiter=delimiter)
    writer.writerow(files.FIELDS)
    writer.writerows(lines)
    data = (files.CSV_MARK + "\n" + out.getvalue()).encode("utf-8", "surrogatepass")
    layout = files.Layout(delimiter=delimiter, decimal_mark=decimal_mark, skip_rows=1)
    try:
        _check_rows(files.parse_csv(data, layout))
    except ValidationFailed as exc:
        assert exc.field == "file"


JSON_VALUES = st.recursive(
    st.one_of(st.none(), st.booleans(), st.integers(), st.floats(allow_nan=False),
              st.text(max_size=10)),
    lambda inner: st.one_of(st.lists(inner, max_size=3),
                            st.dictionaries(st.text(max_size=5), inner, max_size=3)),
    max_leaves=6,
)


@FUZZ
@given(st.lists(st.dictionaries(st.sampled_from([*files.FIELDS, "amplitude_3", ""]),
                                JSON_VALUES, max_size=8), min_size=1, max_size=4))
def test_any_json_runs_are_rows_or_a_refusal(runs: list[dict[str, Any]]) -> None:
    data = json.dumps({"format": "shopapp-runs", "version": 1, "runs": runs}).encode()
    try:
        _check_rows(files.parse_exchange(data))
    except ValidationFailed as exc:
        assert exc.field == "file"


def _fmt(value: float, decimal_mark: str) -> str:
    return f"{value:.10f}".replace(".", decimal_mark)  # as a machine prints: no exponent


RUN = st.fixed_dictionaries({
    "purpose": st.sampled_from(["initial", "check", "final"]),
    "speed_rpm": st.floats(1.0, 99999.0).map(lambda v: round(v, 3)),
    "amplitude_1": st.floats(0.0, 99999.0).map(lambda v: round(v, 4)),
    "angle_1_deg": st.floats(0.0, 359.99).map(lambda v: round(v, 2)),
    "amplitude_2": st.floats(0.0, 99999.0).map(lambda v: round(v, 4)),
    "angle_2_deg": st.floats(0.0, 359.99).map(lambda v: round(v, 2)),
})


@FUZZ
@given(st.lists(RUN, min_size=1, max_size=5, unique_by=lambda r: tuple(r.values())),
       st.sampled_from(["with_rotation", "against_rotation"]), st.floats(0.0, 359.0))
def test_a_run_reads_back_the_same_in_our_format_and_a_machine_layout(
        runs: list[dict[str, Any]], sense: str, zero: float) -> None:
    exchange = io.StringIO()
    w = csv.writer(exchange)
    w.writerow(["serial", "purpose", "speed_rpm", "unit", "amplitude_1", "angle_1_deg",
                "amplitude_2", "angle_2_deg"])
    for r in runs:
        w.writerow(["IX-1", r["purpose"], repr(r["speed_rpm"]), "g·mm", repr(r["amplitude_1"]),
                    repr(r["angle_1_deg"]), repr(r["amplitude_2"]), repr(r["angle_2_deg"])])
    ours = files.parse_exchange((files.CSV_MARK + "\n" + exchange.getvalue()).encode())

    # The machine's convention, written from ours by hand: with rotation its angle is
    # (ours − zero), against rotation (zero − ours), each modulo 360.
    def theirs(angle: float) -> float:
        return ((angle - zero) if sense == "with_rotation" else (zero - angle)) % 360.0

    machine = io.StringIO()
    w = csv.writer(machine, delimiter=";")
    w.writerow(["Rotor", "Step", "Speed", "A1", "P1", "A2", "P2"])
    for r in runs:
        w.writerow(["IX-1", r["purpose"], _fmt(r["speed_rpm"], ","),
                    _fmt(r["amplitude_1"], ","), _fmt(theirs(r["angle_1_deg"]), ","),
                    _fmt(r["amplitude_2"], ","), _fmt(theirs(r["angle_2_deg"]), ",")])
    layout = files.Layout(delimiter=";", decimal_mark=",", skip_rows=2, angle_sense=sense,
                          angle_zero_deg=zero, reading_unit="g·mm", columns={
                              "serial": "Rotor", "purpose": "Step", "speed_rpm": "Speed",
                              "amplitude_1": "A1", "angle_1_deg": "P1", "amplitude_2": "A2",
                              "angle_2_deg": "P2"})
    mapped = files.parse_csv(("Title\nExported\n" + machine.getvalue()).encode(), layout)
    assert all(r.ok for r in ours.rows) and all(r.ok for r in mapped.rows)
    for want, a, b in zip(runs, ours.rows, mapped.rows, strict=True):
        for name, value in want.items():
            assert a.values[name] == value
            if name.startswith("angle"):  # the same direction, whatever the round-off
                diff = (b.values[name] - value + 180.0) % 360.0 - 180.0
                assert abs(diff) < 1e-9, (name, b.values[name], value)
            elif isinstance(value, str):
                assert b.values[name] == value
            else:
                assert math.isclose(b.values[name], value, abs_tol=1e-9), name


@settings(max_examples=max(EXAMPLES // 5, 10), derandomize=True, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(st.lists(st.lists(CELLS, min_size=15, max_size=17), min_size=1, max_size=3))
def test_a_refused_file_writes_nothing(db, make_user, shop, lines: list[list[str]]) -> None:
    op = make_user("operator")
    out = io.StringIO()
    csv.writer(out).writerows([list(files.FIELDS), *lines])
    data = (files.CSV_MARK + "\n" + out.getvalue()).encode("utf-8", "surrogatepass")
    before = [db.scalar(select(func.count()).select_from(m)) for m in (Run, AuditEvent,
                                                                      ImportedFile)]
    with pytest.raises(imports.ImportRefused):  # no job exists: every row is refused
        imports.import_file(db, data, file_name="fuzz.csv", machine=None, by=op,
                            source="file")
    db.rollback()
    after = [db.scalar(select(func.count()).select_from(m)) for m in (Run, AuditEvent,
                                                                     ImportedFile)]
    assert after == before


# Unknown names are counted in words, not "column(s)" (common practice, no source).
def test_an_unknown_csv_column_is_named_and_counted() -> None:
    data = (files.CSV_MARK + "\n" + ",".join(files.FIELDS) + ",mass_lb\n").encode()
    with pytest.raises(ValidationFailed) as one:
        files.parse_exchange(data)
    assert "1 unknown column 'mass_lb'" in str(one.value)
    data = (files.CSV_MARK + "\n" + ",".join(files.FIELDS) + ",mass_lb,colour\n").encode()
    with pytest.raises(ValidationFailed) as two:
        files.parse_exchange(data)
    assert "2 unknown columns 'mass_lb', 'colour'" in str(two.value)


def test_unknown_json_keys_and_fields_are_named_and_counted() -> None:
    with pytest.raises(ValidationFailed) as top:
        files.parse_exchange(json.dumps({"format": files.FORMAT_NAME, "version": 1,
                                         "runs": [{"a": 1}], "colour": 1}).encode())
    assert "1 unknown key colour" in str(top.value)
    parsed = files.parse_exchange(json.dumps({"format": files.FORMAT_NAME, "version": 1,
                                              "runs": [{"a": 1, "b": 2}]}).encode())
    assert parsed.rows[0].errors == ["2 unknown fields a, b"]
