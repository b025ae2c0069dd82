"""The large generated shops the dashboard and job-list benches read, built once and kept.

``shop_app(jobs)`` returns a Flask app (the real stack: login, session, templates) on an
SQLite file filled by the demo generator's bulk history
(:func:`shopapp.demo.bulk.generate_bulk`). The file is kept in ``SHOPAPP_BENCH_DIR``
(default: ``bench-shops`` in the system temp folder) under the job count, so a second
bench run, or another part in the same run, reuses it instead of spending minutes on the
100 000-job shop again. A kept shop is brought up to the current models first: missing
tables and indexes are created and, when its job or run facts are empty, they are
rebuilt (``shopapp measures rebuild``'s SQL), then ANALYZE.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import os
import statistics
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

END_DATE = dt.date(2026, 10, 30)  # fixed, so every run builds the same shop
RUNS_PER_JOB = 10


def _schema_digest() -> str:
    from shopapp.models import Base

    parts = []
    for name, t in sorted(Base.metadata.tables.items()):
        indexes = sorted(i.name or "" for i in t.indexes)
        parts.append(f"{name}:{','.join(sorted(t.c.keys()))}:{','.join(indexes)}")
    text = ";".join(parts)
    return hashlib.sha256(text.encode()).hexdigest()[:10]


def cache_dir() -> Path:
    folder = Path(os.environ.get("SHOPAPP_BENCH_DIR")
                  or Path(tempfile.gettempdir()) / "bench-shops")
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def shop_app(jobs: int) -> tuple[Any, dict[str, Any]]:
    """An app on the kept ``jobs``-job shop (built now when missing) and what it holds."""
    from shopapp import create_app
    from shopapp.core.extensions import get_database
    from shopapp.demo import bulk as demo
    from shopapp.models import Base

    folder = cache_dir() / f"shop-{jobs}"
    folder.mkdir(exist_ok=True)
    info_file = folder / "info.json"
    app = create_app({
        "TESTING": True,
        "SECRET_KEY": "bench-only-secret",
        "DATABASE_URL": f"sqlite:///{folder / 'bench.sqlite3'}",
        "INSTANCE_PATH": str(folder),
        "WTF_CSRF_ENABLED": False,  # the bench logs in by posting the form directly
    })
    if info_file.is_file():
        info = json.loads(info_file.read_text())
        if info.get("schema") != _schema_digest():
            info["upgrade_s"] = _bring_up_to_date(app)
            info["schema"] = _schema_digest()
            info_file.write_text(json.dumps(info))
        return app, info
    with app.app_context():
        database = get_database()
        Base.metadata.create_all(database.engine)
        start = time.perf_counter()
        with database.session() as sess:
            summary = demo.generate_bulk(sess, jobs=jobs, runs_per_job=RUNS_PER_JOB,
                                         end_date=END_DATE)
        with database.engine.connect() as conn:
            conn.exec_driver_sql("ANALYZE")
            conn.commit()
        info = {"jobs": summary.jobs, "runs": summary.runs,
                "generate_s": round(time.perf_counter() - start, 1),
                "logins": summary.logins, "schema": _schema_digest()}
    info_file.write_text(json.dumps(info))
    return app, info


def _bring_up_to_date(app: Any) -> float:
    """Missing tables and indexes of the current models, facts when empty; seconds."""
    from sqlalchemy import func, select

    from shopapp.core.extensions import get_database
    from shopapp.jobs import facts
    from shopapp.models import Base, JobFact, RunFact

    start = time.perf_counter()
    with app.app_context():
        database = get_database()
        # Table by table: the metadata's own create hooks (triggers) exist already.
        for table in Base.metadata.sorted_tables:
            table.create(database.engine, checkfirst=True)
            _add_missing_columns(database.engine, table)
            for index in table.indexes:
                index.create(database.engine, checkfirst=True)
        with database.session() as sess:
            if not sess.scalar(select(func.count()).select_from(JobFact)):
                facts.rebuild(sess)
            elif not sess.scalar(select(func.count()).select_from(RunFact)):
                facts.rebuild_run_facts(sess.connection())
        with database.engine.connect() as conn:
            conn.exec_driver_sql("ANALYZE")
            conn.commit()
    return round(time.perf_counter() - start, 1)


def _add_missing_columns(engine: Any, table: Any) -> None:
    """Columns the models gained since the shop was built, added in place (a kept shop is
    a bench fixture, not a shop's data: a new NOT NULL column without a server default is
    added as nullable, which reads the same). Rebuilding the 100 000-job shop instead
    takes about 2.5 minutes."""
    from sqlalchemy import inspect
    from sqlalchemy.schema import CreateColumn

    present = {c["name"] for c in inspect(engine).get_columns(table.name)}
    with engine.begin() as conn:
        for column in table.columns:
            if column.name in present:
                continue
            ddl = str(CreateColumn(column).compile(dialect=engine.dialect))
            if not column.nullable and column.server_default is None:
                ddl = ddl.replace(" NOT NULL", "")
            conn.exec_driver_sql(f"ALTER TABLE {table.name} ADD COLUMN {ddl}")


def login(app: Any, logins: list[Any], role: str = "owner") -> Any:
    _role, username, password = next(x for x in logins if x[0] == role)
    client = app.test_client()
    resp = client.post("/login", data={"username": username, "password": password})
    if resp.status_code != 302:
        raise RuntimeError(f"bench: could not log in as the demo {role} ({resp.status_code})")
    return client


def get(client: Any, url: str) -> Callable[[], None]:
    def call() -> None:
        resp = client.get(url)
        if resp.status_code != 200:
            raise RuntimeError(f"bench: GET {url} gave {resp.status_code}")
        resp.get_data()

    return call


def median_s(func: Callable[[], Any], repeats: int) -> float:
    func()  # warm caches (templates, statement cache, SQLite pages)
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def ratio(name: str, value: float, goal: float) -> dict[str, Any]:
    """One ratio with its goal (at most) and whether it is met."""
    return {"name": name, "value": round(value, 2), "goal": goal, "met": value <= goal}
