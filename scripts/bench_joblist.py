"""Speed of the job list on a large shop against a small one; prints one JSON object.

On the kept bench shops (:mod:`bench_shop`, 100 000 and 1 000 jobs), as the operator,
side by side in one run: ``/jobs`` page 1, a deep page (half-way down the list: page
2000 of 4000 at 100 000 jobs, page 20 of 40 at 1 000) and a search by customer name
(``/jobs?q=`` with the first word of a customer's name). Each ratio 100 k / 1 k has its
goal in ``GOALS``.
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

# The goals for a deep page and a search (≤ 2×); the first page, ours (≤ 1.5×).
GOALS = {"page1": 1.5, "deep": 2.0, "search": 2.0}
PER_PAGE = 25


def _search_word(app: Any) -> str:
    from sqlalchemy import select

    from shopapp.core.extensions import get_database
    from shopapp.models import Customer

    with app.app_context(), get_database().session() as sess:
        name = sess.scalar(select(Customer.name).order_by(Customer.id).limit(1)) or "a"
    return name.split()[0]


def bench_joblist(jobs: int = 100_000, small: int = 1_000, repeats: int = 5) -> dict[str, Any]:
    out: dict[str, Any] = {}
    times: dict[int, dict[str, float]] = {}
    for n in (jobs, small):
        app, info = bench_shop.shop_app(n)
        client = bench_shop.login(app, info["logins"], role="operator")
        deep = max(1, info["jobs"] // PER_PAGE // 2)
        word = _search_word(app)
        urls = {"page1": "/jobs", "deep": f"/jobs?page={deep}", "search": f"/jobs?q={word}"}
        times[n] = {k: round(bench_shop.median_s(bench_shop.get(client, u), repeats), 4)
                    for k, u in urls.items()}
        out[f"shop_{n}"] = {"jobs": info["jobs"], "deep_page": deep, "search": word,
                            **{f"{k}_s": t for k, t in times[n].items()}}
        app.extensions["shopapp.db"].dispose()
    out["ratios"] = [bench_shop.ratio(f"joblist_{k}_{jobs}_over_{small}",
                                      times[jobs][k] / times[small][k], goal)
                     for k, goal in GOALS.items()]
    return out


def main(argv: list[str] | None = None) -> dict[str, Any]:
    """Print ``{"joblist": {...}}`` and return it (``scripts/bench joblist``)."""
    parser = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    parser.add_argument("--jobs", type=int, default=100_000)
    parser.add_argument("--small", type=int, default=1_000)
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args([] if argv is None else argv)
    result = bench_joblist(args.jobs, args.small, args.repeats)
    print(json.dumps({"joblist": result}))
    return result


if __name__ == "__main__":
    main(sys.argv[1:])
