"""Speed of the owner's dashboard on a large shop; prints one JSON object.

With the demo generator's bulk history (``shopapp.demo.bulk.generate_bulk``:
100 000 jobs, 1 000 000 runs) in an SQLite file in a temp folder, through the real
app stack (Flask test client, login, session, templates):

- ``page_s``: median time of ``GET /dashboard`` for one year (the year before the
  history's last one, so every month has work);
- ``count_s``: median time of a bare ``SELECT count(*) FROM job`` behind a tiny route
  registered only in the bench app (same login and session handling);
- ``ratio_page_to_count`` = page_s / count_s;
- ``page_1k_s``: the same page on a 1 000-job shop, and ``growth_100k_over_1k`` =
  page_s / page_1k_s (goal ≤ 3: cost should grow far slower than the data).

Run ``python scripts/bench_dashboard.py [--jobs N] [--small N] [--repeats N]``;
``bench_dashboard()`` returns the same dict.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import statistics
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

GROWTH_GOAL = 3.0
END_DATE = dt.date(2026, 10, 30)  # fixed, so every run builds the same shop


def _median_s(func: Callable[[], Any], repeats: int) -> float:
    func()  # warm caches (templates, statement cache, SQLite pages)
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def _shop(folder: Path, jobs: int, runs_per_job: int) -> tuple[Any, dict[str, Any]]:
    """An app on a fresh SQLite file filled by the bulk generator, and what it wrote."""
    from flask import Blueprint
    from sqlalchemy import text

    from shopapp import create_app
    from shopapp.core.extensions import db_session, get_database
    from shopapp.core.web import requires
    from shopapp.demo import bulk as demo
    from shopapp.models import Base

    app = create_app({
        "TESTING": True,
        "SECRET_KEY": "bench-only-secret",
        "DATABASE_URL": f"sqlite:///{folder / 'bench.sqlite3'}",
        "INSTANCE_PATH": str(folder),
        "WTF_CSRF_ENABLED": False,  # the bench logs in by posting the form directly
    })
    bench = Blueprint("bench", __name__)

    @bench.get("/_bench/count")
    @requires("view_dashboard")
    def count():  # type: ignore[no-untyped-def]
        return str(db_session().scalar(text("SELECT count(*) FROM job")))

    app.register_blueprint(bench)
    with app.app_context():
        database = get_database()
        Base.metadata.create_all(database.engine)
        start = time.perf_counter()
        with database.session() as sess:
            summary = demo.generate_bulk(sess, jobs=jobs, runs_per_job=runs_per_job,
                                         end_date=END_DATE)
        with database.engine.connect() as conn:
            conn.exec_driver_sql("ANALYZE")
        info = {"jobs": summary.jobs, "runs": summary.runs,
                "generate_s": round(time.perf_counter() - start, 1),
                "logins": summary.logins}
    return app, info


def _client(app: Any, logins: list[tuple[str, str, str]]) -> Any:
    role, username, password = next(x for x in logins if x[0] == "owner")
    client = app.test_client()
    resp = client.post("/login", data={"username": username, "password": password})
    if resp.status_code != 302:
        raise RuntimeError(f"bench: could not log in as the demo {role} ({resp.status_code})")
    return client


def _get(client: Any, url: str) -> Callable[[], None]:
    def call() -> None:
        resp = client.get(url)
        if resp.status_code != 200:
            raise RuntimeError(f"bench: GET {url} gave {resp.status_code}")
        resp.get_data()

    return call


def bench_dashboard(jobs: int = 100_000, small: int = 1_000, runs_per_job: int = 10,
                    repeats: int = 5) -> dict[str, Any]:
    """Time the dashboard for one year on a ``jobs`` shop and on a ``small`` shop."""
    year = END_DATE.year - 1
    url = f"/dashboard?period=year&on={year}-06-01"
    out: dict[str, Any] = {"period": str(year), "goal_growth": GROWTH_GOAL}
    with tempfile.TemporaryDirectory(prefix="shopapp-bench-") as big_dir:
        app, info = _shop(Path(big_dir), jobs, runs_per_job)
        client = _client(app, info.pop("logins"))
        out.update(info)
        out["page_s"] = round(_median_s(_get(client, url), repeats), 4)
        out["count_s"] = round(_median_s(_get(client, "/_bench/count"), repeats * 4), 5)
        app.extensions["shopapp.db"].dispose()
    with tempfile.TemporaryDirectory(prefix="shopapp-bench-") as small_dir:
        app, info = _shop(Path(small_dir), small, runs_per_job)
        client = _client(app, info.pop("logins"))
        out["small_jobs"] = info["jobs"]
        out["page_1k_s"] = round(_median_s(_get(client, url), repeats), 4)
        out["count_1k_s"] = round(_median_s(_get(client, "/_bench/count"), repeats * 4), 5)
        app.extensions["shopapp.db"].dispose()
    out["ratio_page_to_count"] = round(out["page_s"] / out["count_s"], 1)
    out["growth_100k_over_1k"] = round(out["page_s"] / out["page_1k_s"], 2)
    out["growth_goal_met"] = out["growth_100k_over_1k"] <= GROWTH_GOAL
    return out


def main(argv: list[str] | None = None) -> None:
    """Print ``{"dashboard": {...}}`` (the lead's ``scripts/bench dashboard`` calls this)."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=100_000)
    parser.add_argument("--small", type=int, default=1_000)
    parser.add_argument("--runs-per-job", type=int, default=10)
    parser.add_argument("--repeats", type=int, default=5)
    # Called by scripts/bench with no arguments: its own argv is not ours to read.
    args = parser.parse_args([] if argv is None else argv)
    result = bench_dashboard(args.jobs, args.small, args.runs_per_job, args.repeats)
    print(json.dumps({"dashboard": result}))


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
    main(sys.argv[1:])
