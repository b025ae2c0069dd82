"""The bulk generator's jobs played by two worker processes while this one writes.

Bulk mode on SQLite (:func:`shopapp.demo.bulk.generate_bulk`): the planned jobs are
split by rotor type into :data:`WORKERS` groups of about equal size. Everything one
job's simulation reads from earlier jobs stays within its rotor type (the stored
influence sets of its type, the earlier visit a customer return follows), so each
group plays alone, in start order, in a forked process with a random stream of its
own (drawn from the shop's, so a seed still gives one history) and every
``WORKERS``-th id of each table (:meth:`shopapp.demo.store.Ids.interleave`). A worker
writes each batch of its rows as driver-ready INSERTs
(:func:`shopapp.demo.store.driver_statement`) to a file of a private temporary folder
and sends only the file's name: a batch sent through the pipe itself kept the worker
waiting until this process had finished executing the other worker's batch (a tenth of
a worker's time). This process executes the batches in the caller's transaction as they
come, in each worker's order, so the simulation and SQLite's writing overlap on two
cores, then takes over what the workers learned (sets, timelines, final states) for the
steps after.

Needs the ``fork`` start method (Linux): the workers inherit the shop models and
plans instead of having them pickled, and never touch the database connection.
"""

from __future__ import annotations

import multiprocessing
import pickle
import random
import tempfile
import traceback
from multiprocessing.connection import Connection, wait
from pathlib import Path
from typing import TYPE_CHECKING, Any

from shopapp.demo import store as demo_store

if TYPE_CHECKING:
    from shopapp.demo.history import History, Steps
    from shopapp.demo.planning import Plan

WORKERS = 2


def split(order: list[Plan], n: int) -> list[list[Plan]]:
    """``order`` in ``n`` groups of whole rotor types (largest type first onto the
    smallest group), each in the original order."""
    by_type: dict[int, int] = {}
    for p in order:
        by_type[p.rotor.type.id] = by_type.get(p.rotor.type.id, 0) + 1
    sizes = [0] * n
    group_of: dict[int, int] = {}
    for type_id, count in sorted(by_type.items(), key=lambda kv: (-kv[1], kv[0])):
        k = min(range(n), key=lambda i: (sizes[i], i))
        group_of[type_id] = k
        sizes[k] += count
    groups: list[list[Plan]] = [[] for _ in range(n)]
    for p in order:
        groups[group_of[p.rotor.type.id]].append(p)
    return groups


def play(history: History, order: list[Plan], steps: Steps | None) -> None:
    """Play ``order`` in :data:`WORKERS` processes and write their rows here (see module)."""
    store = history.store
    store.flush_rows()  # the shop's own rows (setup audits): written once, here
    with demo_store.sqlite_indexes_built_after(store.session), \
            tempfile.TemporaryDirectory(prefix="shopapp-demo-") as folder:
        _play(history, order, steps, Path(folder))


def _play(history: History, order: list[Plan], steps: Steps | None, folder: Path) -> None:
    store = history.store
    groups = split(order, WORKERS)
    base = history.shop.rng.getrandbits(62)
    ctx = multiprocessing.get_context("fork")
    inbox: dict[Connection, int] = {}
    procs = []
    try:
        for k, plans in enumerate(groups):
            receive, send = ctx.Pipe(duplex=False)
            proc = ctx.Process(target=_worker, args=(history, plans, k, base, send, folder),
                               name=f"shopapp-demo-{k}", daemon=True)
            proc.start()
            send.close()
            inbox[receive] = k
            procs.append(proc)
        done = [0] * WORKERS
        results: list[dict[str, Any]] = [{} for _ in range(WORKERS)]
        while inbox:
            for conn in wait(list(inbox)):
                assert isinstance(conn, Connection)
                k = inbox[conn]
                try:
                    kind, payload = conn.recv()
                except EOFError:
                    raise RuntimeError(f"demo worker {k} ended without its results") from None
                if kind == "rows":
                    name, done[k] = payload
                    demo_store.execute_statements(store.session, _take_batch(folder / name))
                    if steps is not None:
                        steps(sum(done), len(order))
                elif kind == "done":
                    results[k] = payload
                    del inbox[conn]
                    conn.close()
                else:
                    raise RuntimeError(f"demo worker {k} failed:\n{payload}")
    finally:
        for proc in procs:
            proc.join(timeout=5)
            if proc.is_alive():
                proc.terminate()
                proc.join()
    _take_over(history, results)


def _worker(history: History, plans: list[Plan], k: int, base: int, out: Connection,
            folder: Path) -> None:
    """One group's jobs (runs in the forked process); rows go to files in ``folder``,
    their names and the results to ``out``."""
    try:
        store = history.store
        history.shop.rng = random.Random(base * WORKERS + k)
        store.ids.interleave(k, WORKERS)
        store.counts = dict.fromkeys(store.counts, 0)
        store.job_states = []
        played = [0]
        batches = [0]

        def sink(statements: list[demo_store.Statement]) -> None:
            batches[0] += 1
            name = f"worker-{k}-{batches[0]:06d}.pickle"
            with (folder / name).open("wb") as f:
                pickle.dump(statements, f, protocol=pickle.HIGHEST_PROTOCOL)
            out.send(("rows", (name, played[0])))

        def count(done: int, _total: int) -> None:
            played[0] = done

        store.sink = sink
        # Smaller batches than the serial path's: the writer starts sooner and waits
        # less for the last one.
        history.play(plans, count, flush_every=500)
        out.send(("done", {
            "ids": store.ids.next_ids, "counts": store.counts,
            "job_states": store.job_states, "sets": history.sets,
            "set_scores": history.set_scores, "cert_jobs": history.cert_jobs,
            "ops": history.ops, "timeline": history.timeline, "final": history.final,
            "job_sets": history.job_sets, "rtest_jobs": history.rtest_jobs,
        }))
    except BaseException:  # reported to the parent, which raises it
        out.send(("error", traceback.format_exc()))
    finally:
        out.close()


def _take_batch(path: Path) -> list[demo_store.Statement]:
    """A worker's batch of statements, read from its file, which is then removed."""
    with path.open("rb") as f:
        statements: list[demo_store.Statement] = pickle.load(f)  # our own worker's file
    path.unlink()
    return statements


def _take_over(history: History, results: list[dict[str, Any]]) -> None:
    """The workers' ids, counts and what later steps read, as if played here (worker order)."""
    store = history.store
    store.ids.continue_after([r["ids"] for r in results])
    for r in results:
        for name, n in r["counts"].items():
            store.counts[name] += n
        store.job_states.extend(r["job_states"])
        history.sets.update(r["sets"])
        history.set_scores.update(r["set_scores"])
        history.cert_jobs.update(r["cert_jobs"])
        history.timeline.update(r["timeline"])
        history.final.update(r["final"])
        history.job_sets.extend(r["job_sets"])
        history.rtest_jobs += r["rtest_jobs"]
        for at, _order, job_id, kind, data in r["ops"]:
            history.ops.append((at, len(history.ops), job_id, kind, data))
