"""Speed of the owner's dashboard on a large shop against a small one; prints one JSON object.

With the demo generator's bulk history (:mod:`bench_shop`: 100 000 jobs, 1 000 000 runs,
two years to 2026-10-30) and a 1 000-job shop built the same way, through the real app
stack (Flask test client, login, session, templates), side by side in one run:

- ``year_s``: median time of ``GET /dashboard`` for the year before the history's last
  one (every month has work); ``month_s``: the same for one month of it;
- the same on the 1 000-job shop, and the ratios 100 k / 1 k with their goal (≤ 1.5: the
  page should cost what the period shows, not what the shop has ever done).

Run ``python scripts/bench_dashboard.py [--jobs N] [--small N] [--repeats N]``.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import bench_shop

GROWTH_GOAL = 1.5


def bench_dashboard(jobs: int = 100_000, small: int = 1_000, repeats: int = 5) -> dict[str, Any]:
    year = bench_shop.END_DATE.year - 1
    urls = {"year": f"/dashboard?period=year&on={year}-06-01",
            "month": f"/dashboard?period=month&on={year}-06-01"}
    out: dict[str, Any] = {"period": str(year)}
    times: dict[int, dict[str, float]] = {}
    for n in (jobs, small):
        app, info = bench_shop.shop_app(n)
        client = bench_shop.login(app, info["logins"])
        out[f"shop_{n}"] = {"jobs": info["jobs"], "runs": info["runs"],
                            "generate_s": info["generate_s"]}
        times[n] = {view: round(bench_shop.median_s(bench_shop.get(client, url), repeats), 4)
                    for view, url in urls.items()}
        out[f"shop_{n}"].update({f"{view}_s": t for view, t in times[n].items()})
        app.extensions["shopapp.db"].dispose()
    out["ratios"] = [bench_shop.ratio(f"dashboard_{view}_{jobs}_over_{small}",
                                      times[jobs][view] / times[small][view], GROWTH_GOAL)
                     for view in urls]
    return out


def main(argv: list[str] | None = None) -> dict[str, Any]:
    """Print ``{"dashboard": {...}}`` and return it (``scripts/bench dashboard``)."""
    parser = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    parser.add_argument("--jobs", type=int, default=100_000)
    parser.add_argument("--small", type=int, default=1_000)
    parser.add_argument("--repeats", type=int, default=5)
    # Called by scripts/bench with no arguments: its own argv is not ours to read.
    args = parser.parse_args([] if argv is None else argv)
    result = bench_dashboard(args.jobs, args.small, args.repeats)
    print(json.dumps({"dashboard": result}))
    return result


if __name__ == "__main__":
    main(sys.argv[1:])
