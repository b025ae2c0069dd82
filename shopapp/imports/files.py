"""Reading a spreadsheet file into rows of text: CSV (comma or semicolon, UTF-8 with or
without BOM) and xlsx (first sheet, openpyxl in read-only mode).

Nothing here knows the shop: a :class:`Sheet` is the file's header and its rows as
strings (or None for an empty cell), each row with its line number and, where the
row itself is broken (cut short, too many values, a formula or error cell), the reason.
Whole-file refusals (too large, not UTF-8, not a spreadsheet, no header, too many rows)
raise :class:`~shopapp.core.errors.ValidationFailed` on the field ``file``.

Limits (README, "Moving over from spreadsheets"): :data:`MAX_FILE_BYTES` on the file as
stored, checked before it is read (:func:`size_refusal`); :data:`MAX_XLSX_UNPACKED_BYTES`
on an xlsx file's unpacked parts (a small zip can unpack to gigabytes);
:data:`MAX_ROWS` data rows.

Formulas are never evaluated: a CSV cell is text, whatever its first character; an xlsx
cell holding a formula is reported on its row (the file keeps a formula and at most the
value a spreadsheet program last cached, which may be stale).
"""

from __future__ import annotations

import codecs
import csv
import datetime as dt
import hashlib
import io
import zipfile
from collections.abc import Sequence
from dataclasses import dataclass, field

from openpyxl import load_workbook
from openpyxl.utils.exceptions import InvalidFileException

from shopapp.core.errors import ValidationFailed

MAX_FILE_BYTES = 20 * 1024 * 1024  # 20 MB: about 100 000 rows of a wide rotor-type sheet
MAX_XLSX_UNPACKED_BYTES = 200 * 1024 * 1024
MAX_ROWS = 100_000
FORMATS = ("csv", "xlsx")
_ZIP_MAGIC = b"PK\x03\x04"


@dataclass(frozen=True)
class SourceRow:
    """One data row: ``line`` in the file (the header is line 1), column → text or None."""

    line: int
    values: dict[str, str | None]
    problem: str | None = None  # the row itself is broken: why (names the column)


@dataclass(frozen=True)
class Sheet:
    """A file read: its name, format, SHA-256, columns (lower case) and data rows."""

    file_name: str
    file_format: str
    sha256: str
    columns: tuple[str, ...]
    rows: tuple[SourceRow, ...]
    delimiter: str = ","
    size_bytes: int = 0
    notes: tuple[str, ...] = field(default=())


def _refuse(message: str) -> ValidationFailed:
    return ValidationFailed("file", message)


def size_refusal(size_bytes: int) -> str | None:
    """Why a file of ``size_bytes`` is refused before reading it, or None."""
    if size_bytes > MAX_FILE_BYTES:
        return (f"the file has {size_bytes // (1024 * 1024)} MB; the limit is "
                f"{MAX_FILE_BYTES // (1024 * 1024)} MB: split it into several files")
    if size_bytes == 0:
        return "the file is empty"
    return None


def file_format(file_name: str) -> str:
    """``csv`` or ``xlsx`` from the file name's ending."""
    lower = file_name.lower()
    for fmt in FORMATS:
        if lower.endswith("." + fmt):
            return fmt
    raise _refuse(f"{file_name!r} is neither .csv nor .xlsx; save the sheet as one of them")


def read_sheet(data: bytes, file_name: str) -> Sheet:
    """Read ``data`` (the whole file) as CSV or xlsx, by the file name's ending.

    Raises
    ------
    ValidationFailed
        Field ``file``: too large, empty, wrong encoding, not the format its name says,
        no header, a column named twice or without a name, more than :data:`MAX_ROWS` rows.
    """
    refusal = size_refusal(len(data))
    if refusal is not None:
        raise _refuse(refusal)
    fmt = file_format(file_name)
    digest = hashlib.sha256(data).hexdigest()
    if fmt == "xlsx":
        if not data.startswith(_ZIP_MAGIC):
            raise _refuse(f"{file_name!r} is not an xlsx workbook (an xlsx file is a zip "
                          "archive); save it again from the spreadsheet program as .xlsx")
        columns, rows = _read_xlsx(data)
        delimiter = ","
    else:
        if data.startswith(_ZIP_MAGIC):
            raise _refuse(f"{file_name!r} is a workbook, not text: name it .xlsx or save it "
                          "as CSV UTF-8")
        columns, rows, delimiter = _read_csv(data)
    return Sheet(file_name=file_name, file_format=fmt, sha256=digest, columns=columns,
                 rows=tuple(rows), delimiter=delimiter, size_bytes=len(data))


# --------------------------------------------------------------------------- CSV


def _decode(data: bytes) -> str:
    if data.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        raise _refuse("the file is UTF-16 text; save it as 'CSV UTF-8' (comma or semicolon)")
    if data.startswith(codecs.BOM_UTF8):
        data = data[len(codecs.BOM_UTF8):]
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + 1
        raise _refuse(
            f"line {line} is not UTF-8 text (byte 0x{data[exc.start]:02X}); the file is in "
            "another encoding: save it as 'CSV UTF-8' and import it again") from None
    if "\x00" in text:
        line = text[:text.index("\x00")].count("\n") + 1
        raise _refuse(f"line {line} holds a NUL character: this is not a text file")
    return text


def _delimiter(header_line: str) -> str:
    """Semicolon when the header has more semicolons than commas (spreadsheets set to a
    decimal comma save CSV that way), else comma."""
    return ";" if header_line.count(";") > header_line.count(",") else ","


def _header(cells: list[str]) -> tuple[str, ...]:
    names = [c.strip().lower() for c in cells]
    while names and not names[-1]:
        names.pop()  # trailing empty columns (a spreadsheet's stray separators)
    if not names:
        raise _refuse("the first line is empty: it must name the columns (see the template)")
    for k, name in enumerate(names, start=1):
        if not name:
            raise _refuse(f"column {k} of the header has no name")
        if names.index(name) != k - 1:
            raise _refuse(f"column {name!r} is named twice in the header")
    return tuple(names)


def _read_csv(data: bytes) -> tuple[tuple[str, ...], list[SourceRow], str]:
    text = _decode(data)
    first = text.split("\n", 1)[0]
    delimiter = _delimiter(first)
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, strict=True)
    rows: list[SourceRow] = []
    columns: tuple[str, ...] = ()
    try:
        for cells in reader:
            if not columns:
                columns = _header(cells)
                continue
            if not any(c.strip() for c in cells):
                continue  # blank line
            if len(rows) >= MAX_ROWS:
                raise _refuse(f"more than {MAX_ROWS} rows; split the file")
            rows.append(_row(reader.line_num, columns, cells))
    except csv.Error as exc:
        raise _refuse(f"line {reader.line_num}: {exc} — a quote opened and not closed, or "
                      "a value longer than any field") from None
    if not columns:
        raise _refuse("the file has no header line")
    return columns, rows, delimiter


def _row(line: int, columns: tuple[str, ...], cells: Sequence[str | None]) -> SourceRow:
    extra = cells[len(columns):]
    problem = None
    if any(c is not None and str(c).strip() for c in extra):
        problem = (f"has {len(cells)} values for {len(columns)} columns: a separator inside a "
                   "value? Put such values in double quotes")
    elif len(cells) < len(columns):
        problem = (f"has {len(cells)} values for {len(columns)} columns: the line looks cut "
                   f"short (column {columns[len(cells)]!r} and after are missing)")
    values: dict[str, str | None] = {}
    for name, cell in zip(columns, cells, strict=False):
        values[name] = None if cell is None or not str(cell).strip() else str(cell)
    return SourceRow(line=line, values=values, problem=problem)


# --------------------------------------------------------------------------- xlsx


def _cell_text(value: object) -> str | None:
    """An xlsx cell's value as the text a CSV would hold (dates ISO, numbers as typed)."""
    if value is None:
        return None
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, dt.datetime):
        return (value.date().isoformat() if value.time() == dt.time() else value.isoformat())
    if isinstance(value, dt.date):
        return value.isoformat()
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    if isinstance(value, int | float):
        return repr(value)
    text = str(value)
    return text if text.strip() else None


def _read_xlsx(data: bytes) -> tuple[tuple[str, ...], list[SourceRow]]:
    try:
        with zipfile.ZipFile(io.BytesIO(data)) as archive:
            unpacked = sum(info.file_size for info in archive.infolist())
    except zipfile.BadZipFile:
        raise _refuse("the xlsx file is damaged (not a readable zip archive)") from None
    if unpacked > MAX_XLSX_UNPACKED_BYTES:
        raise _refuse(f"the workbook unpacks to {unpacked // (1024 * 1024)} MB; the limit is "
                      f"{MAX_XLSX_UNPACKED_BYTES // (1024 * 1024)} MB")
    try:
        book = load_workbook(io.BytesIO(data), read_only=True, data_only=False)
    except (InvalidFileException, zipfile.BadZipFile, KeyError, ValueError, OSError) as exc:
        raise _refuse(f"the xlsx file cannot be read ({str(exc)[:80]})") from None
    try:
        sheet = book.worksheets[0]
        columns: tuple[str, ...] = ()
        rows: list[SourceRow] = []
        for line, cells in enumerate(sheet.iter_rows(), start=1):
            if not columns:
                columns = _header([_cell_text(c.value) or "" for c in cells])
                continue
            texts: list[str | None] = []
            problem = None
            for k, cell in enumerate(cells):
                kind = cell.data_type  # "f" formula, "e" error; an EmptyCell says "n"
                name = columns[k] if k < len(columns) else f"column {k + 1}"
                if kind == "f" and problem is None:
                    problem = (f"column {name!r} holds a formula ({str(cell.value)[:40]}); "
                               "formulas are never run: paste the values instead")
                elif kind == "e" and problem is None:
                    problem = f"column {name!r} holds a spreadsheet error ({cell.value})"
                texts.append(_cell_text(cell.value))
            if not any(t is not None for t in texts):
                continue
            texts += [None] * (len(columns) - len(texts))  # a sheet's row ends at its last cell
            if len(rows) >= MAX_ROWS:
                raise _refuse(f"more than {MAX_ROWS} rows; split the file")
            row = _row(line, columns, texts)
            if problem is not None and row.problem is None:
                row = SourceRow(line=row.line, values=row.values, problem=problem)
            rows.append(row)
    finally:
        book.close()
    if not columns:
        raise _refuse("the first sheet is empty: its first row must name the columns")
    return columns, rows
