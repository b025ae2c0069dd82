"""Speed of the balancing core's batch forms; prints one JSON object.

- two-plane: ``influence.solve_two_plane_batch`` over 100 000 jobs against a bare
  ``numpy.linalg.solve`` of the same stacked 2×2 complex systems (goal: ratio ≤ 1.5);
- tolerance: ``tolerance.judge_residuals_batch`` verdicts per second over
  1 000 000 two-plane residuals moved onto the bearing planes.

Run ``python scripts/bench_calc.py``; ``bench_calc()`` returns the same dict.
"""

from __future__ import annotations

import json
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

RATIO_GOAL = 1.5


def _best_of(func: Callable[[], Any], repeats: int) -> float:
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - start)
    return best


def bench_calc(
    jobs: int = 100_000, residuals: int = 1_000_000, repeats: int = 5, seed: int = 1
) -> dict[str, Any]:
    """Time the batch two-plane solve and the batch tolerance verdict.

    Returns seconds per solve for both solvers, their ratio (batch / bare numpy)
    and verdicts per second. Random well-conditioned inputs (diagonal-dominant
    influence matrices), fixed seed.
    """
    import numpy as np

    from shopapp.balancing.influence import solve_two_plane_batch
    from shopapp.balancing.planes import transfer_matrix
    from shopapp.balancing.tolerance import judge_residuals_batch

    rng = np.random.default_rng(seed)

    def cplx(*shape: int) -> np.ndarray:
        return rng.normal(size=shape) + 1j * rng.normal(size=shape)

    a = cplx(jobs, 2, 2) * 0.2
    a[:, 0, 0] += 1.0
    a[:, 1, 1] += 1.0
    v0 = cplx(jobs, 2)

    def batch() -> None:
        solve_two_plane_batch(a, v0)

    def bare() -> None:
        np.linalg.solve(a, -v0[..., None])

    # Same answer first, so the timing compares like with like.
    w_batch = solve_two_plane_batch(a, v0).corrections
    w_bare = np.linalg.solve(a, -v0[..., None])[..., 0]
    max_diff = float(np.max(np.abs(w_batch - w_bare)))

    t_batch = _best_of(batch, repeats)
    t_bare = _best_of(bare, repeats)

    res = cplx(residuals, 2) * 100.0
    limits = np.array([250.0, 180.0])
    t_matrix = transfer_matrix(150.0, 650.0, 0.0, 800.0)

    def verdicts() -> None:
        judge_residuals_batch(res, limits, transfer=t_matrix)

    t_verdict = _best_of(verdicts, repeats)
    return {
        "two_plane_jobs": jobs,
        "two_plane_batch_s_per_solve": t_batch / jobs,
        "numpy_linalg_solve_s_per_solve": t_bare / jobs,
        "two_plane_ratio": t_batch / t_bare,
        "two_plane_ratio_goal": RATIO_GOAL,
        "two_plane_ratio_met": t_batch / t_bare <= RATIO_GOAL,
        "two_plane_max_abs_difference_g": max_diff,
        "tolerance_residuals": residuals,
        "tolerance_verdicts_per_s": residuals / t_verdict,
        "repeats": repeats,
    }


def main() -> None:
    """Print :func:`bench_calc` as JSON."""
    root = str(Path(__file__).resolve().parents[1])
    if root not in sys.path:
        sys.path.insert(0, root)  # run from a checkout without installing the package
    print(json.dumps(bench_calc(), indent=2))


if __name__ == "__main__":
    main()
