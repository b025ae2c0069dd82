"""Backup and restore of the whole shop database (``shopapp backup`` / ``shopapp restore``).

The archive is one ZIP file:

``manifest.json``
    ``format`` ("shopapp-backup"), ``format_version``, the Alembic ``schema_revision``,
    the ``backend`` it was taken from, ``created_at`` (UTC), and per table (in the
    order rows are inserted back) its ``name``, ``columns``, ``rows`` and the
    ``sha256`` of its data file.
``tables/<table>.jsonl``
    Every row of the table as one JSON object per line (keys sorted, no spaces),
    in primary-key order: numbers as JSON numbers (floats exactly, shortest
    round-trip form), times as ISO 8601 UTC, dates as ISO dates, bytes (the
    certificate PDFs) as base64, JSON columns as JSON. The same rows give the same
    bytes on SQLite and on PostgreSQL, so a backup of one restores into the other.
``shopapp.sqlite3`` (SQLite only)
    The database file itself as SQLite's online backup API copied it, openable
    with any SQLite tool. The table files are written from this copy.

Consistency while the shop works: on SQLite the online backup API copies one
committed state of the file (other connections may keep writing); on PostgreSQL
every table is read in one ``REPEATABLE READ`` read-only transaction (one snapshot).
No external tool (``pg_dump``) is needed.

Restore (:func:`restore`) checks the archive against its manifest before touching
the database, refuses a schema revision other than this code's newest, refuses a
database that holds any row unless ``force`` (then deletes everything first, the
certificate guards set aside for that moment only), inserts every row in one
transaction, checks the database against the manifest again before the caller
commits, and records the restore in :class:`~shopapp.models.BackupLog`. The backup
log itself is the database's own and is kept as it is (see :func:`restored_tables`).
"""

from __future__ import annotations

import base64
import datetime as dt
import hashlib
import json
import os
import sqlite3
import tempfile
import time
import zipfile
import zlib
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

from sqlalchemy import (
    JSON,
    Column,
    Connection,
    Date,
    DateTime,
    Engine,
    LargeBinary,
    Table,
    TypeDecorator,
    bindparam,
    create_engine,
    func,
    select,
    text,
)
from sqlalchemy.orm import Session

from shopapp.core import schema
from shopapp.core.errors import ServiceError
from shopapp.models import BackupLog, Base, utcnow

FORMAT = "shopapp-backup"
FORMAT_VERSION = 1
MANIFEST = "manifest.json"
SQLITE_FILE = "shopapp.sqlite3"
BATCH = 500  # rows per INSERT round trip
_CHUNK = 1 << 20


class BackupError(ServiceError):
    """The archive or the database cannot be backed up or restored; says why."""


@dataclass(frozen=True)
class TableEntry:
    name: str
    columns: tuple[str, ...]
    rows: int
    sha256: str


@dataclass(frozen=True)
class Manifest:
    schema_revision: str
    backend: str
    created_at: str
    tables: tuple[TableEntry, ...]
    sqlite_file_sha256: str | None = None

    @property
    def total_rows(self) -> int:
        return sum(t.rows for t in self.tables)

    def to_json(self) -> str:
        body: dict[str, Any] = {
            "format": FORMAT,
            "format_version": FORMAT_VERSION,
            "schema_revision": self.schema_revision,
            "backend": self.backend,
            "created_at": self.created_at,
            "tables": [{"name": t.name, "columns": list(t.columns), "rows": t.rows,
                        "sha256": t.sha256} for t in self.tables],
        }
        if self.sqlite_file_sha256:
            body["sqlite_file"] = {"name": SQLITE_FILE, "sha256": self.sqlite_file_sha256}
        return json.dumps(body, indent=2, ensure_ascii=False) + "\n"

    @classmethod
    def from_json(cls, raw: bytes, source: str) -> Manifest:
        try:
            body = json.loads(raw)
            if body.get("format") != FORMAT:
                raise BackupError(f"{source} is not a shopapp backup (its manifest says "
                                  f"format {body.get('format')!r})")
            if body.get("format_version") != FORMAT_VERSION:
                raise BackupError(f"{source}: backup format version "
                                  f"{body.get('format_version')!r} is not one this shopapp "
                                  f"reads (it reads {FORMAT_VERSION})")
            tables = tuple(TableEntry(str(t["name"]), tuple(t["columns"]), int(t["rows"]),
                                      str(t["sha256"])) for t in body["tables"])
            sqlite_file = body.get("sqlite_file") or {}
            return cls(str(body["schema_revision"]), str(body["backend"]),
                       str(body["created_at"]), tables, sqlite_file.get("sha256"))
        except (ValueError, KeyError, TypeError, AttributeError) as exc:
            raise BackupError(f"{source}: the manifest cannot be read ({exc})") from None


@dataclass(frozen=True)
class BackupResult:
    path: Path
    size_bytes: int
    sha256: str
    manifest: Manifest
    seconds: float


@dataclass(frozen=True)
class RestoreResult:
    path: Path
    manifest: Manifest
    restored_rows: int
    deleted_rows: int
    seconds: float


# --------------------------------------------------------------------------- rows as JSON


def _kind(column: Column[Any]) -> str:
    kind = column.type
    if isinstance(kind, TypeDecorator):
        kind = kind.impl_instance
    if isinstance(kind, DateTime):
        return "datetime"
    if isinstance(kind, Date):
        return "date"
    if isinstance(kind, LargeBinary):
        return "bytes"
    if isinstance(kind, JSON):
        return "json"
    return "plain"


def _encode(kind: str, value: Any) -> Any:
    if value is None:
        return None
    if kind == "datetime":
        if value.tzinfo is None:  # a plain DateTime column on SQLite: stored as UTC
            value = value.replace(tzinfo=dt.UTC)
        return value.astimezone(dt.UTC).isoformat()
    if kind == "date":
        return value.isoformat()
    if kind == "bytes":
        return base64.b64encode(bytes(value)).decode("ascii")
    return value


def _decode(kind: str, value: Any) -> Any:
    if value is None:
        return None
    if kind == "datetime":
        return dt.datetime.fromisoformat(value)
    if kind == "date":
        return dt.date.fromisoformat(value)
    if kind == "bytes":
        return base64.b64decode(value)
    return value


def _line(row: dict[str, Any]) -> bytes:
    text_ = json.dumps(row, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                       allow_nan=False)
    return (text_ + "\n").encode("utf-8")


def tables() -> list[Table]:
    """Every table of the models, parents before children (the insert order)."""
    return list(Base.metadata.sorted_tables)


def restored_tables() -> list[Table]:
    """The tables a restore replaces: all but the backup log.

    The log belongs to the database, not to the shop's data: a restore keeps the
    database's own log (its backups were made and still exist) and adds a line.
    The archive carries its log too, for the record.
    """
    return [t for t in tables() if t.name != BackupLog.__tablename__]


def _rows(conn: Connection, table: Table) -> Iterator[dict[str, Any]]:
    """The table's rows, encoded, in primary-key order (the same order on every backend)."""
    kinds = {c.name: _kind(c) for c in table.columns}
    pk = list(table.primary_key.columns)
    integer_pk = all(c.type.python_type is int for c in pk)
    stmt = select(table).order_by(*pk)
    if integer_pk:
        for row in conn.execute(stmt.execution_options(yield_per=BATCH)).mappings():
            yield {k: _encode(kinds[k], v) for k, v in row.items()}
        return
    # Text keys sort differently by collation: sort them here, byte-wise.
    rows = [{k: _encode(kinds[k], v) for k, v in r.items()}
            for r in conn.execute(stmt).mappings()]
    rows.sort(key=lambda r: tuple(str(r[c.name]).encode("utf-8") for c in pk))
    yield from rows


def _table_lines(conn: Connection, table: Table) -> Iterator[bytes]:
    for row in _rows(conn, table):
        yield _line(row)


def table_digests(conn: Connection, which: Iterable[Table] | None = None
                  ) -> dict[str, tuple[int, str]]:
    """Rows and SHA-256 of each table's data (default: every table) as an archive holds it."""
    out = {}
    for table in tables() if which is None else which:
        digest = hashlib.sha256()
        count = 0
        for line in _table_lines(conn, table):
            digest.update(line)
            count += 1
        out[table.name] = (count, digest.hexdigest())
    return out


# --------------------------------------------------------------------------- backup


def _sqlite_snapshot(engine: Engine, target: Path) -> None:
    """Copy the live database to ``target`` with SQLite's online backup API."""
    raw = engine.raw_connection()
    try:
        source = raw.driver_connection
        assert isinstance(source, sqlite3.Connection)
        dest = sqlite3.connect(str(target))
        try:
            source.backup(dest)
            check = dest.execute("PRAGMA integrity_check").fetchone()
            # A copy made for safe keeping needs no write-ahead log beside it.
            dest.execute("PRAGMA journal_mode=DELETE")
        finally:
            dest.close()
    finally:
        raw.close()
    if not check or check[0] != "ok":
        raise BackupError(f"the database failed SQLite's integrity check ({check}); "
                          "nothing was written")


def _write_tables(conn: Connection, zf: zipfile.ZipFile) -> list[TableEntry]:
    entries = []
    for table in tables():
        digest = hashlib.sha256()
        count = 0
        pending = bytearray()
        with zf.open(f"tables/{table.name}.jsonl", "w") as out:
            try:
                for line in _table_lines(conn, table):
                    digest.update(line)
                    pending += line
                    count += 1
                    if len(pending) >= _CHUNK:
                        out.write(pending)
                        pending.clear()
            except ValueError as exc:  # a NaN or infinity has no JSON form
                raise BackupError(f"table {table.name}, row {count + 1}: {exc} "
                                  "(nothing was written)") from None
            out.write(pending)
        entries.append(TableEntry(table.name, tuple(c.name for c in table.columns), count,
                                  digest.hexdigest()))
    return entries


def _file_sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with path.open("rb") as fh:
        while block := fh.read(_CHUNK):
            digest.update(block)
    return digest.hexdigest()


def _revision_or_refuse(conn: Connection) -> str:
    revision = schema.connection_revision(conn)
    head = schema.code_head()
    if revision is None:
        raise BackupError("the database has no shopapp schema; nothing to back up")
    if revision != head:
        raise BackupError(f"the database is at schema revision {revision}, this shopapp's "
                          f"newest is {head}: run `shopapp db upgrade` first, then back up")
    return revision


def write_archive(engine: Engine, path: Path, *, overwrite: bool = False) -> BackupResult:
    """Write the backup archive of the database behind ``engine`` to ``path``.

    The file appears complete or not at all (written beside it, then renamed).
    """
    started = time.perf_counter()
    path = path.expanduser().absolute()
    if path.is_dir():
        raise BackupError(f"{path} is a folder: give a file name (e.g. "
                          f"{path / default_name()})")
    if path.exists() and not overwrite:
        raise BackupError(f"{path} exists already: choose another name (nothing was written)")
    if not path.parent.is_dir():
        raise BackupError(f"folder {path.parent} does not exist (nothing was written)")
    created = utcnow().replace(microsecond=0).isoformat()
    fd, partial_name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".partial",
                                        dir=path.parent)
    os.close(fd)
    partial = Path(partial_name)
    try:
        with zipfile.ZipFile(partial, "w", compression=zipfile.ZIP_DEFLATED,
                             compresslevel=6) as zf:
            if engine.dialect.name == "sqlite":
                manifest = _sqlite_archive(engine, zf, created)
            else:
                manifest = _portable_archive(engine, zf, created)
            zf.writestr(MANIFEST, manifest.to_json())
        with partial.open("rb") as fh:
            os.fsync(fh.fileno())
        os.replace(partial, path)
    except BaseException:
        partial.unlink(missing_ok=True)
        raise
    return BackupResult(path, path.stat().st_size, _file_sha256(path), manifest,
                        time.perf_counter() - started)


def _sqlite_archive(engine: Engine, zf: zipfile.ZipFile, created: str) -> Manifest:
    with tempfile.TemporaryDirectory(prefix="shopapp-backup-") as tmp:
        copy = Path(tmp) / SQLITE_FILE
        _sqlite_snapshot(engine, copy)
        snap = create_engine(f"sqlite:///file:{copy}?mode=ro&uri=true")
        try:
            with snap.connect() as conn:
                revision = _revision_or_refuse(conn)
                entries = _write_tables(conn, zf)
        finally:
            snap.dispose()
        zf.write(copy, SQLITE_FILE)
        return Manifest(revision, "sqlite", created, tuple(entries), _file_sha256(copy))


def _portable_archive(engine: Engine, zf: zipfile.ZipFile, created: str) -> Manifest:
    with (engine.connect().execution_options(isolation_level="REPEATABLE READ") as conn,
          conn.begin()):
        if conn.dialect.name == "postgresql":
            conn.execute(text("SET TRANSACTION READ ONLY"))
        revision = _revision_or_refuse(conn)
        entries = _write_tables(conn, zf)
    return Manifest(revision, engine.dialect.name, created, tuple(entries))


def default_name(now: dt.datetime | None = None) -> str:
    """``shopapp-backup-YYYYMMDD-HHMMSS.zip`` (UTC)."""
    return f"shopapp-backup-{(now or utcnow()).strftime('%Y%m%d-%H%M%S')}.zip"


def take_backup(session: Session, path: Path, *, overwrite: bool = False) -> BackupResult:
    """Write the archive (its own read connection) and log it in ``session`` (flushed).

    ``path`` may be a folder: the archive then gets :func:`default_name` inside it.
    """
    target = path.expanduser()
    if target.is_dir():
        target = target / default_name()
    engine = session.get_bind()
    assert isinstance(engine, Engine)
    result = write_archive(engine, target, overwrite=overwrite)
    session.add(BackupLog(kind="backup", path=str(result.path), size_bytes=result.size_bytes,
                          sha256=result.sha256, schema_revision=result.manifest.schema_revision,
                          row_count=result.manifest.total_rows))
    session.flush()
    return result


def last_entries(session: Session) -> tuple[BackupLog | None, BackupLog | None]:
    """The newest backup and the newest restore logged in this database."""
    found = []
    for kind in ("backup", "restore"):
        found.append(session.scalars(
            select(BackupLog).where(BackupLog.kind == kind)
            .order_by(BackupLog.at.desc(), BackupLog.id.desc()).limit(1)
        ).first())
    return found[0], found[1]


# --------------------------------------------------------------------------- restore


def _open_member(zf: zipfile.ZipFile, name: str, source: str) -> IO[bytes]:
    try:
        return zf.open(name)
    except KeyError:
        raise BackupError(f"{source} is damaged or incomplete: {name} is missing") from None


def _member_lines(zf: zipfile.ZipFile, name: str, source: str) -> Iterator[bytes]:
    with _open_member(zf, name, source) as fh:
        yield from fh


def read_manifest(zf: zipfile.ZipFile, source: str) -> Manifest:
    with _open_member(zf, MANIFEST, source) as fh:
        return Manifest.from_json(fh.read(), source)


def verify_archive(zf: zipfile.ZipFile, manifest: Manifest, source: str) -> None:
    """Every table file has the rows and the SHA-256 its manifest states."""
    for entry in manifest.tables:
        digest = hashlib.sha256()
        count = 0
        try:
            for line in _member_lines(zf, f"tables/{entry.name}.jsonl", source):
                digest.update(line)
                count += 1
        except (zipfile.BadZipFile, zlib.error, EOFError) as exc:
            raise BackupError(f"{source} is damaged: table {entry.name} cannot be read "
                              f"({exc})") from None
        if count != entry.rows or digest.hexdigest() != entry.sha256:
            raise BackupError(f"{source} is damaged: table {entry.name} holds {count} rows "
                              f"with SHA-256 {digest.hexdigest()[:16]}…, its manifest says "
                              f"{entry.rows} rows with {entry.sha256[:16]}… (nothing restored)")


def _check_schema(conn: Connection, manifest: Manifest, source: str) -> None:
    head = schema.code_head()
    if manifest.schema_revision != head:
        if manifest.schema_revision not in schema.known_revisions():
            raise BackupError(
                f"{source} was made by a newer shopapp (schema revision "
                f"{manifest.schema_revision}; this one knows up to {head}): restore it with "
                "that version or a later one (nothing restored)")
        raise BackupError(
            f"{source} holds schema revision {manifest.schema_revision}, this shopapp's is "
            f"{head}: restore it with the shopapp version that made it, then upgrade with "
            "`shopapp db upgrade` (nothing restored)")
    current = schema.connection_revision(conn)
    if current is None:
        raise BackupError("the database has no shopapp schema yet: create it with "
                          "`shopapp db upgrade`, then restore (nothing restored)")
    if current != head:
        raise BackupError(f"the database is at schema revision {current}, the backup at "
                          f"{head}: run `shopapp db upgrade` first (nothing restored)")
    expected = {t.name: tuple(c.name for c in t.columns) for t in tables()}
    held = {t.name: t.columns for t in manifest.tables}
    if set(held) != set(expected):
        missing = sorted(set(expected) - set(held))
        extra = sorted(set(held) - set(expected))
        raise BackupError(f"{source} does not match this schema (tables missing: "
                          f"{', '.join(missing) or 'none'}; unknown: {', '.join(extra) or 'none'})")
    for name, columns in held.items():
        if set(columns) != set(expected[name]):
            raise BackupError(f"{source}: table {name} has columns {', '.join(columns)}, this "
                              f"schema {', '.join(expected[name])} (nothing restored)")


def _row_counts(conn: Connection) -> dict[str, int]:
    return {t.name: conn.execute(select(func.count()).select_from(t)).scalar_one()
            for t in restored_tables()}


def _wipe(conn: Connection) -> None:
    """Delete every row, the certificate and evidence guards set aside meanwhile."""
    names = [t.name for t in restored_tables()]
    if conn.dialect.name == "postgresql":
        for name in names:
            conn.execute(text(f'ALTER TABLE "{name}" DISABLE TRIGGER USER'))
        conn.execute(text("TRUNCATE " + ", ".join(f'"{n}"' for n in names)))
        for name in names:
            conn.execute(text(f'ALTER TABLE "{name}" ENABLE TRIGGER USER'))
        return
    triggers: list[tuple[str, str]] = [
        (str(name), str(sql)) for name, sql in conn.execute(text(
            "SELECT name, sql FROM sqlite_master WHERE type = 'trigger' AND sql IS NOT NULL"))
    ]
    for name, _sql in triggers:
        conn.execute(text(f'DROP TRIGGER "{name}"'))
    for table in reversed(restored_tables()):
        conn.execute(table.delete())
    for _name, sql in triggers:
        conn.execute(text(sql))


def _deferred_columns(table: Table) -> list[str]:
    """Foreign keys across a cycle of tables (``use_alter``): inserted empty, set afterwards.

    A table's references to itself (a return job's earlier job) need nothing: rows go
    in primary-key order and point back at earlier rows. Only nullable columns without
    a CHECK on them are ever deferred (``job.influence_set_id``).
    """
    return [fk.parent.name for fk in table.foreign_keys
            if fk.constraint is not None and fk.constraint.use_alter]


def _batches(items: Iterable[dict[str, Any]]) -> Iterator[list[dict[str, Any]]]:
    batch: list[dict[str, Any]] = []
    for item in items:
        batch.append(item)
        if len(batch) >= BATCH:
            yield batch
            batch = []
    if batch:
        yield batch


@dataclass
class _Pending:
    """Values of deferred foreign keys, set once every table is in."""

    table: Table
    columns: list[str]
    pk: list[str]
    rows: list[dict[str, Any]]

    def apply(self, conn: Connection) -> None:
        where = [self.table.c[c] == bindparam(f"pk_{c}") for c in self.pk]
        stmt = self.table.update().where(*where).values(
            {c: bindparam(f"v_{c}") for c in self.columns})
        for batch in _batches(self.rows):
            conn.execute(stmt, batch)


def _insert_table(conn: Connection, zf: zipfile.ZipFile, table: Table, source: str
                  ) -> _Pending | None:
    kinds = {c.name: _kind(c) for c in table.columns}
    deferred = _deferred_columns(table)
    # Set again with the deferred ones, or the UPDATE would stamp them (``updated_at``).
    kept = deferred + [c.name for c in table.columns if c.onupdate is not None]
    pk = [c.name for c in table.primary_key.columns]
    later: list[dict[str, Any]] = []

    def decoded() -> Iterator[dict[str, Any]]:
        for line in _member_lines(zf, f"tables/{table.name}.jsonl", source):
            raw = json.loads(line)
            row = {k: _decode(kinds[k], v) for k, v in raw.items()}
            if deferred and any(row.get(c) is not None for c in deferred):
                later.append({**{f"pk_{c}": row[c] for c in pk},
                              **{f"v_{c}": row[c] for c in kept}})
                row = {**row, **dict.fromkeys(deferred)}
            yield row

    for batch in _batches(decoded()):
        conn.execute(table.insert(), batch)
    return _Pending(table, kept, pk, later) if later else None


def _reset_sequences(conn: Connection) -> None:
    """PostgreSQL: each id sequence continues after the largest restored id."""
    if conn.dialect.name != "postgresql":
        return
    for table in restored_tables():
        pk = list(table.primary_key.columns)
        if len(pk) != 1 or pk[0].type.python_type is not int:
            continue
        col = pk[0].name
        conn.execute(text(
            f"SELECT setval(pg_get_serial_sequence(:t, :c), "
            f'COALESCE((SELECT max("{col}") FROM "{table.name}"), 0) + 1, false)'
        ), {"t": table.name, "c": col})


def restore(session: Session, path: Path, *, force: bool = False) -> RestoreResult:
    """Replace the database's rows by the archive's, in ``session``'s transaction.

    The caller commits (or rolls back on any error: then nothing changed).
    Refused: an archive that does not match its manifest, a schema revision other
    than this code's newest, a database schema not at that revision, and a
    database holding any row unless ``force``.
    """
    started = time.perf_counter()
    path = path.expanduser().absolute()
    source = str(path)
    if not path.is_file():
        raise BackupError(f"{source}: no such file")
    try:
        zf = zipfile.ZipFile(path)
    except zipfile.BadZipFile:
        raise BackupError(f"{source} is not a shopapp backup (not a ZIP archive)") from None
    with zf:
        manifest = read_manifest(zf, source)
        verify_archive(zf, manifest, source)  # before: the archive is what it says
        conn = session.connection()
        _check_schema(conn, manifest, source)
        counts = _row_counts(conn)
        held = sum(counts.values())
        if held and not force:
            biggest = sorted(((n, t) for t, n in counts.items() if n), reverse=True)[:4]
            listed = ", ".join(f"{n} rows in {t}" for n, t in biggest)
            raise BackupError(
                f"the database is not empty ({held} rows: {listed}, …). A restore replaces "
                "everything in it: add --force to delete its data and restore the backup "
                "(nothing was changed)")
        if conn.dialect.name == "sqlite":
            conn.execute(text("PRAGMA defer_foreign_keys = ON"))
        if held:
            _wipe(conn)
        pending = [_insert_table(conn, zf, table, source) for table in restored_tables()]
        for todo in pending:
            if todo is not None:
                todo.apply(conn)
        _reset_sequences(conn)
        # After: the database now holds exactly the archive's rows.
        now = table_digests(conn, restored_tables())
        for entry in manifest.tables:
            if entry.name not in now:
                continue
            rows, digest = now[entry.name]
            if (rows, digest) != (entry.rows, entry.sha256):
                raise BackupError(f"after restoring, table {entry.name} holds {rows} rows with "
                                  f"SHA-256 {digest[:16]}…, the backup {entry.rows} rows with "
                                  f"{entry.sha256[:16]}…; rolled back, nothing restored")
    restored_rows = sum(t.rows for t in manifest.tables if t.name != BackupLog.__tablename__)
    session.add(BackupLog(kind="restore", path=source, size_bytes=path.stat().st_size,
                          sha256=_file_sha256(path), schema_revision=manifest.schema_revision,
                          row_count=restored_rows))
    session.flush()
    return RestoreResult(path, manifest, restored_rows, held, time.perf_counter() - started)
