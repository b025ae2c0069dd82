"""Reading run files: shopapp's own exchange format and a machine's export through its mapping.

Pure parsing (bytes in, rows out; no database). The exchange format "shopapp-runs",
version 1, is documented in ``docs/exchange-format.md``; a machine's export is read
through a :class:`Layout` built from the machine's saved column mapping. Every value is
checked here for what a file alone can tell (encoding, line shape, numbers, units,
angle range, duplicates); the rules that need the job (its state, the machine's reading
unit and speed range, the rotor's planes) are the jobs use-case's, applied later.

Angles leave this module in shopapp's convention: degrees in the direction of rotation
from the shaft's reference mark (docs/architecture.md, "Conventions"). A machine that
counts against rotation or from another zero is converted here, at the edge, with
:func:`shopapp.balancing.phasors.from_display_deg` — the conversion the shop's own
display setting uses.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from shopapp.balancing.phasors import from_display_deg
from shopapp.core.checks import day_refusal
from shopapp.core.clock import shop_date
from shopapp.core.display import counted, plain
from shopapp.core.errors import ValidationFailed
from shopapp.core.forms import parse_number
from shopapp.models import READING_UNITS, RUN_PURPOSES

FORMAT_NAME = "shopapp-runs"
FORMAT_VERSION = 1
# The first line of an exchange CSV file.
CSV_MARK = f"# {FORMAT_NAME} version {FORMAT_VERSION}"
# A run is a line of about 150 bytes: 2 MiB is over 10 000 runs, far more than a day of
# any machine, and small enough to hold in memory and preview on one page.
MAX_FILE_BYTES = 2 * 1024 * 1024
MAX_RUNS = 2000

# Our fields, in the order of the exchange format's columns.
FIELDS = (
    "job", "serial", "purpose", "speed_rpm", "unit",
    "amplitude_1", "angle_1_deg", "amplitude_2", "angle_2_deg",
    "trial_plane", "trial_mass_g", "trial_angle_deg", "trial_radius_mm",
    "taken_at", "machine", "notes",
)
NUMBER_FIELDS = frozenset({"speed_rpm", "amplitude_1", "angle_1_deg", "amplitude_2",
                           "angle_2_deg", "trial_plane", "trial_mass_g", "trial_angle_deg",
                           "trial_radius_mm"})
ANGLE_FIELDS = frozenset({"angle_1_deg", "angle_2_deg", "trial_angle_deg"})
REQUIRED_FIELDS = ("purpose", "speed_rpm", "amplitude_1", "angle_1_deg")
MAX_TEXT_CHARS = 500

# Ways units are written in files → our reading units (docs/exchange-format.md).
UNIT_NAMES: dict[str, str] = {
    "um": "um", "µm": "um", "μm": "um", "micron": "um",
    "mm/s": "mm/s",
    "g·mm": "g·mm", "gmm": "g·mm", "g.mm": "g·mm", "g*mm": "g·mm", "g mm": "g·mm",
    "mil": "mil", "mils": "mil",
    "in/s": "in/s", "ips": "in/s",
}


@dataclass(frozen=True)
class Layout:
    """How a CSV file reads: its shape, its angle convention and its column names.

    ``columns`` maps our field (:data:`FIELDS`) to the file's header text. ``angle_sense``
    and ``angle_zero_deg`` are the file's convention (``with_rotation``, 0 is ours).
    ``reading_unit`` is every amplitude's unit when the file has no unit column.
    """

    delimiter: str = ","
    decimal_mark: str = "."
    skip_rows: int = 0
    encoding: str = "utf-8"
    angle_sense: str = "with_rotation"
    angle_zero_deg: float = 0.0
    speed_unit: str = "rpm"
    reading_unit: str | None = None
    columns: Mapping[str, str] = field(default_factory=lambda: {f: f for f in FIELDS})
    name: str = f"{FORMAT_NAME} CSV"
    # Our own format: a field may be left out of the header, an unknown one is refused
    # (a misspelt field is never ignored). A mapping names exactly the columns it reads.
    ours: bool = False


# The exchange CSV: comma, decimal point, UTF-8, shopapp's angles, our column names.
EXCHANGE_CSV = Layout(skip_rows=1, ours=True)


@dataclass
class Row:
    """One run as read from a file: clean values, or the reasons it is refused."""

    where: str  # "line 4" (CSV) or "run 3" (JSON): what a person looks for in the file
    values: dict[str, Any] = field(default_factory=dict)
    errors: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.errors


@dataclass
class ParsedFile:
    """A whole file: which format it was read as and its rows."""

    kind: str
    rows: list[Row]


def refuse(message: str) -> ValidationFailed:
    """The whole file is refused (nothing of it is read further)."""
    return ValidationFailed("file", message)


def size_refusal(size: int) -> str | None:
    """Why a file of ``size`` bytes is refused, or None."""
    if size > MAX_FILE_BYTES:
        return (f"the file has {size} bytes; at most {MAX_FILE_BYTES} bytes "
                f"({MAX_FILE_BYTES // (1024 * 1024)} MiB) are read: split it into smaller files")
    if size == 0:
        return "the file is empty"
    return None


def read_bytes(path: Path) -> bytes:
    """A file's bytes, refused above :data:`MAX_FILE_BYTES` without reading it all."""
    refusal = size_refusal(path.stat().st_size)
    if refusal:
        raise refuse(refusal)
    with path.open("rb") as fh:
        data = fh.read(MAX_FILE_BYTES + 1)  # the file may have grown since stat()
    refusal = size_refusal(len(data))
    if refusal:
        raise refuse(refusal)
    return data


def _decode(data: bytes, encoding: str) -> str:
    try:
        text = data.decode("utf-8-sig" if encoding == "utf-8" else encoding)
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + 1
        raise refuse(f"line {line}: byte 0x{data[exc.start]:02X} is not {encoding} text; "
                     f"save the file as {encoding}"
                     + (" (or set the machine's encoding in its mapping)"
                        if encoding == "utf-8" else "")) from None
    if "\x00" in text:
        line = text[:text.index("\x00")].count("\n") + 1
        raise refuse(f"line {line}: the file holds a NUL character; it is not a text file")
    return text


def is_exchange(data: bytes) -> bool:
    """True when ``data`` starts like an exchange file (CSV mark line or a JSON object)."""
    head = data[:200].lstrip(b"\xef\xbb\xbf \t\r\n")
    return head.startswith(b"{") or head.startswith(CSV_MARK.encode())


def parse_exchange(data: bytes) -> ParsedFile:
    """Read a shopapp-runs file (CSV or JSON, told apart by its first character)."""
    head = data[:200].lstrip(b"\xef\xbb\xbf \t\r\n")
    if head.startswith(b"{"):
        return parse_json(data)
    text = _decode(data, "utf-8")
    first = text.split("\n", 1)[0].strip()
    if first != CSV_MARK:
        raise refuse(f"line 1: an exchange CSV file starts with the line {CSV_MARK!r}, "
                     f"this one with {first[:60]!r}")
    return parse_csv(data, EXCHANGE_CSV)


# --------------------------------------------------------------------------- values


def _number(raw: str, decimal_mark: str) -> float:
    """A cell as a number, the file's decimal mark taken off first (ValueError if not)."""
    other = "," if decimal_mark == "." else "."
    if other in raw:
        # With a decimal comma a point is a thousands separator, and the other way round:
        # never guessed (core.forms.parse_number refuses the same for a typed number).
        raise ValueError(f"{raw[:40]!r} holds {other!r}, but this file's decimal mark is "
                         f"{decimal_mark!r}")
    return parse_number(raw.replace(",", ".") if decimal_mark == "," else raw)


def _unit(raw: str) -> str:
    unit = UNIT_NAMES.get(raw.strip().lower()) or UNIT_NAMES.get(raw.strip())
    if unit is None:
        raise ValueError(f"unit {raw[:20]!r} is not known; use one of "
                         + ", ".join(READING_UNITS))
    return unit


def _taken_at(raw: str) -> dt.datetime:
    try:
        when = dt.datetime.fromisoformat(raw.strip())
    except ValueError:
        raise ValueError(f"{raw[:40]!r} is not a date and time; write it as "
                         "2026-11-03T09:15:00") from None
    if when.tzinfo is None:
        when = when.replace(tzinfo=dt.UTC)  # documented: a time without an offset is UTC
    when = when.astimezone(dt.UTC)
    refusal = day_refusal(shop_date(when))
    if refusal:
        raise ValueError(refusal)
    return when


def clean_row(where: str, raw: Mapping[str, Any], layout: Layout, *,
              numbers_as_text: bool = True) -> Row:
    """Check one run's raw values (text from a CSV cell, or JSON values) into a :class:`Row`.

    Numbers may arrive as text (CSV, read with the layout's decimal mark) or as JSON
    numbers; text in a number field is refused, never read as zero.
    """
    row = Row(where=where)
    values: dict[str, Any] = {}
    for name in FIELDS:
        value = raw.get(name)
        if isinstance(value, str):
            value = value.strip()
            if not value:
                value = None
        if value is None:
            values[name] = None
            continue
        if name in NUMBER_FIELDS:
            if (isinstance(value, bool) or not isinstance(value, int | float | str)
                    or (isinstance(value, str) and not numbers_as_text)):
                row.errors.append(f"{name}: must be a number, got {str(value)[:40]!r}")
                continue
            try:
                number = (_number(value, layout.decimal_mark) if isinstance(value, str)
                          else parse_number(repr(float(value))))
            except (ValueError, OverflowError) as exc:
                row.errors.append(f"{name}: {exc}")
                continue
            if name in ANGLE_FIELDS:
                if not 0.0 <= number <= 360.0:
                    row.errors.append(f"{name}: {plain(number)}° is out of range (0–360°)")
                    continue
                number = from_display_deg(number, sense=layout.angle_sense,
                                          zero_deg=layout.angle_zero_deg)
            if name == "speed_rpm" and layout.speed_unit == "Hz":
                number *= 60.0
            if name == "trial_plane":
                if number not in (1.0, 2.0):
                    row.errors.append(f"trial_plane: {plain(number)} is not a plane (1 or 2)")
                    continue
                number = int(number)
            values[name] = number
            continue
        if not isinstance(value, str):
            row.errors.append(f"{name}: must be text, got {str(value)[:40]!r}")
            continue
        if len(value) > MAX_TEXT_CHARS:
            row.errors.append(f"{name}: longer than {MAX_TEXT_CHARS} characters")
            continue
        try:
            if name == "unit":
                values[name] = _unit(value)
            elif name == "taken_at":
                values[name] = _taken_at(value)
            elif name == "purpose":
                if value.lower() not in RUN_PURPOSES:
                    raise ValueError(f"{value[:20]!r} is not a run purpose; use one of "
                                     + ", ".join(RUN_PURPOSES))
                values[name] = value.lower()
            else:
                values[name] = value
        except ValueError as exc:
            row.errors.append(f"{name}: {exc}")
    if values.get("unit") is None and layout.reading_unit is not None and "unit" not in {
            e.split(":")[0] for e in row.errors}:
        values["unit"] = layout.reading_unit
    for name in REQUIRED_FIELDS:
        if values.get(name) is None and not any(e.startswith(f"{name}:") for e in row.errors):
            row.errors.append(f"{name}: is required")
    if values.get("unit") is None and not any(e.startswith("unit:") for e in row.errors):
        row.errors.append("unit: is required")
    if values.get("job") is None and values.get("serial") is None:
        row.errors.append("job: give the job number or the rotor's serial number")
    row.values = values
    return row


def _mark_duplicates(rows: list[Row]) -> None:
    seen: dict[tuple[Any, ...], str] = {}
    for row in rows:
        if not row.ok:
            continue
        key = tuple(row.values.get(f) for f in FIELDS)
        if key in seen:
            row.errors.append(f"repeats {seen[key]} (the same run twice)")
        else:
            seen[key] = row.where


# --------------------------------------------------------------------------- CSV


def parse_csv(data: bytes, layout: Layout) -> ParsedFile:
    """Read a CSV file with ``layout``: rows after the header line, each checked."""
    text = _decode(data, layout.encoding)
    lines = text.splitlines()
    header_at = layout.skip_rows  # 0-based index of the header line
    if len(lines) <= header_at:
        raise refuse(f"the file has {counted(len(lines), 'line')}; the header was expected on line "
                     f"{header_at + 1}")
    reader = csv.reader(io.StringIO("\n".join(lines[header_at:])), delimiter=layout.delimiter,
                        strict=True)
    try:
        header = [h.strip() for h in next(reader)]
        index: dict[str, int] = {}
        if layout.ours:
            unknown = [h for h in header if h not in FIELDS]
            if unknown:
                raise refuse(f"line {header_at + 1}: {counted(len(unknown), 'unknown column')} "
                             f"{', '.join(repr(h) for h in unknown[:5])}; the columns are "
                             + ", ".join(FIELDS))
            if len(set(header)) != len(header):
                raise refuse(f"line {header_at + 1}: a column is named twice")
        for ours, theirs in layout.columns.items():
            if not theirs or (layout.ours and theirs not in header):
                continue
            if theirs not in header:
                raise refuse(f"line {header_at + 1}: no column {theirs!r} (for {ours}) in the "
                             f"header; found {', '.join(repr(h) for h in header[:20])}")
            index[ours] = header.index(theirs)
        rows: list[Row] = []
        for cells in reader:
            where = f"line {header_at + reader.line_num}"
            if not any(c.strip() for c in cells):
                continue
            if len(rows) >= MAX_RUNS:
                raise refuse(f"more than {MAX_RUNS} runs in one file: split it")
            if len(cells) != len(header):
                rows.append(Row(where=where, errors=[
                    f"has {len(cells)} fields, the header has {len(header)} "
                    "(a cut-off or damaged line?)"]))
                continue
            rows.append(clean_row(where, {ours: cells[i] for ours, i in index.items()}, layout))
    except csv.Error as exc:
        raise refuse(f"line {header_at + reader.line_num}: not readable as CSV ({exc})") from None
    if not rows:
        raise refuse("the file holds no runs")
    _mark_duplicates(rows)
    return ParsedFile(kind=layout.name, rows=rows)


# --------------------------------------------------------------------------- JSON


def parse_json(data: bytes) -> ParsedFile:
    """Read the JSON variant ``{"format": "shopapp-runs", "version": 1, "runs": [...]}``."""
    text = _decode(data, "utf-8")
    try:
        doc = json.loads(text, parse_constant=lambda c: c)  # NaN/Infinity stay text: refused
    except json.JSONDecodeError as exc:
        raise refuse(f"line {exc.lineno}: not valid JSON ({exc.msg})") from None
    except RecursionError:
        raise refuse("the JSON is nested too deeply") from None
    if not isinstance(doc, dict) or doc.get("format") != FORMAT_NAME:
        raise refuse(f'a JSON exchange file is an object with "format": "{FORMAT_NAME}"')
    if doc.get("version") != FORMAT_VERSION or isinstance(doc.get("version"), bool):
        raise refuse(f"version {str(doc.get('version'))[:20]!r} is not known; this shopapp "
                     f"reads version {FORMAT_VERSION}")
    runs = doc.get("runs")
    if not isinstance(runs, list) or not runs:
        raise refuse('"runs" must be a list of at least one run')
    if len(runs) > MAX_RUNS:
        raise refuse(f"more than {MAX_RUNS} runs in one file: split it")
    unknown_top = set(doc) - {"format", "version", "runs"}
    if unknown_top:
        raise refuse(f"{counted(len(unknown_top), 'unknown key')} "
                     f"{', '.join(sorted(map(str, unknown_top)))[:80]}")
    rows: list[Row] = []
    for n, item in enumerate(runs, start=1):
        where = f"run {n}"
        if not isinstance(item, dict):
            rows.append(Row(where=where, errors=["must be an object of fields"]))
            continue
        unknown = set(item) - set(FIELDS)
        if unknown:
            rows.append(Row(where=where, errors=[
                f"{counted(len(unknown), 'unknown field')} "
                f"{', '.join(sorted(map(str, unknown)))[:80]}"]))
            continue
        rows.append(clean_row(where, item, Layout(name=f"{FORMAT_NAME} JSON"),
                              numbers_as_text=False))
    _mark_duplicates(rows)
    return ParsedFile(kind=f"{FORMAT_NAME} JSON", rows=rows)
