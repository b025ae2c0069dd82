"""Time to build the 100 000-job benchmark shop from nothing; prints one JSON object.

The demo generator's bulk history (:func:`shopapp.demo.bulk.generate_bulk`, the shop
:mod:`bench_shop` keeps for the dashboard and job-list parts, same settings) written into
a fresh SQLite file in a temporary folder, from the first row to the commit:

- ``seconds``: wall time, with its goal (under two minutes: a benchmark shop that takes
  longer is rebuilt too rarely to keep the benches honest);
- ``cpu_s``: CPU seconds of this process and its two worker processes together;
- the jobs and runs it holds.

Run ``python scripts/bench_generator.py [--jobs N]``.
"""

from __future__ import annotations

import argparse
import json
import resource
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import bench_shop

GOAL_S = 120.0


def _cpu_s() -> float:
    own = resource.getrusage(resource.RUSAGE_SELF)
    workers = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + workers.ru_utime + workers.ru_stime


def bench_generator(jobs: int = 100_000) -> dict[str, Any]:
    from shopapp import create_app
    from shopapp.core.extensions import get_database
    from shopapp.demo import bulk
    from shopapp.models import Base

    with tempfile.TemporaryDirectory(prefix="shopapp-bench-generator-") as folder:
        app = create_app({
            "TESTING": True,
            "SECRET_KEY": "bench-only-secret",
            "DATABASE_URL": f"sqlite:///{Path(folder) / 'generated.sqlite3'}",
            "INSTANCE_PATH": folder,
        })
        with app.app_context():
            database = get_database()
            Base.metadata.create_all(database.engine)
            cpu_before = _cpu_s()
            start = time.perf_counter()
            with database.session() as sess:
                summary = bulk.generate_bulk(sess, jobs=jobs,
                                             runs_per_job=bench_shop.RUNS_PER_JOB,
                                             end_date=bench_shop.END_DATE)
                sess.commit()
            seconds = time.perf_counter() - start
            cpu_s = _cpu_s() - cpu_before
            database.engine.dispose()
    out: dict[str, Any] = {"jobs": summary.jobs, "runs": summary.runs,
                           "seconds": round(seconds, 1), "cpu_s": round(cpu_s, 1)}
    out["goals"] = [{"name": f"generator_{jobs}_jobs_s", "value": out["seconds"],
                     "goal": GOAL_S, "met": seconds < GOAL_S}]
    return out


def main(argv: list[str] | None = None) -> dict[str, Any]:
    """Print ``{"generator": {...}}`` and return it (``scripts/bench generator``)."""
    parser = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    parser.add_argument("--jobs", type=int, default=100_000)
    # Called by scripts/bench with no arguments: its own argv is not ours to read.
    args = parser.parse_args([] if argv is None else argv)
    result = bench_generator(args.jobs)
    print(json.dumps({"generator": result}))
    return result


if __name__ == "__main__":
    main(sys.argv[1:])
