"""``scripts/bench load``: a busy shop against a real server, side by side with its floor.

Starts ``shopapp serve`` as shipped on Linux (2 gunicorn processes × 4 threads), and
``shopapp serve --workers 1`` (one waitress process, 4 threads: Windows' only choice), on a
free loopback port over a fresh database — SQLite in
a temp folder, and PostgreSQL too when ``SHOPAPP_BENCH_POSTGRES_URL`` names an empty
database (refused when it holds tables; emptied of the bench's tables between servers)
— with the invented demo
shop (a short history, no certificates). Then USERS operators, each logged in on
its own cookie jar, run a fixed mix for a bounded time: job page, job list,
dashboard (as owner), start page, and a run posted on their own open job. The
same mix by one user gives the single-user median; ``/healthz`` under the same
load settings is the floor. The load runs twice: once with no pause between a person's
requests (the stress test: on two cores eight people who never pause must queue, so by
Little's law their mean wait alone is about four service times), and once paced, each
person pausing a random :data:`THINK_SECONDS` on average between requests.

Prints one JSON object per backend: requests, errors (any status other than
200/302), req/s, p50/p95/p99 in ms, runs posted vs stored (lost rows), whether
each job's run numbers are gapless, peak RSS of the server (all its processes), and the
ratio p95(load) / median(single user) with its goal (≤ 4) and whether it is met, for both
runs; ``main``
returns those ratios, the errors and the lost rows (goal 0) for ``scripts/bench all``.
Only loopback addresses are used; every loop is bounded in count and time.
"""

from __future__ import annotations

import http.cookiejar
import json
import os
import random
import re
import secrets
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
import urllib.error
import urllib.parse
import urllib.request
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))

import bench_shop

ROOT = Path(__file__).resolve().parent.parent
SHOPAPP = str(ROOT / ".venv" / "bin" / "shopapp")
SERVERS = {"gunicorn": "shopapp serve: 2 gunicorn processes x 4 threads",
           "waitress": "shopapp serve --workers 1: waitress, 4 threads"}
USERS = int(os.environ.get("SHOPAPP_BENCH_USERS", "8"))
SECONDS = float(os.environ.get("SHOPAPP_BENCH_SECONDS", "20"))
MAX_REQUESTS_PER_USER = 2000
# A person's pause between two requests in the paced run: exponential, this mean (seconds).
# Eight people each clicking about once a second is a very busy shop; the run without any
# pause is kept beside it as the stress test.
THINK_SECONDS = float(os.environ.get("SHOPAPP_BENCH_THINK_SECONDS", "1.0"))
PASSWORD = "bench-" + secrets.token_hex(8)
GOAL_P95_RATIO = 4.0
_CSRF = re.compile(r'name="csrf_token"[^>]*value="([^"]+)"')


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _env(instance: Path, url: str) -> dict[str, str]:
    env = dict(os.environ)
    env.update({"SHOPAPP_INSTANCE_PATH": str(instance), "SHOPAPP_DATABASE_URL": url,
                "SHOPAPP_SECRET_KEY": secrets.token_hex(16), "SHOPAPP_LOG_LEVEL": "WARNING"})
    return env


def _prepare(env: dict[str, str]) -> None:
    def run(*args: str, stdin: str | None = None) -> None:
        subprocess.run([SHOPAPP, *args], env=env, check=True, input=stdin, text=True,
                       capture_output=True, timeout=600)

    run("db", "upgrade")
    run("demo", "load", "--years", "0.1", "--no-certificates")
    for i in range(USERS):
        run("user", "add", f"bench{i}", "--role", "operator", "--full-name", f"Bench {i}",
            "--password-stdin", stdin=PASSWORD + "\n")
    run("user", "add", "benchowner", "--role", "owner", "--password-stdin", stdin=PASSWORD + "\n")


class Client:
    """One person's browser: a cookie jar and the CSRF token of the last page."""

    def __init__(self, base: str) -> None:
        self.base = base
        self.opener = urllib.request.build_opener(
            urllib.request.HTTPCookieProcessor(http.cookiejar.CookieJar()),
            _NoRedirect())
        self.csrf = ""

    def get(self, path: str) -> tuple[int, str]:
        return self._open(urllib.request.Request(self.base + path))

    def post(self, path: str, data: dict[str, str]) -> tuple[int, str]:
        body = urllib.parse.urlencode({**data, "csrf_token": self.csrf}).encode()
        return self._open(urllib.request.Request(self.base + path, data=body, method="POST"))

    def _open(self, req: urllib.request.Request) -> tuple[int, str]:
        try:
            with self.opener.open(req, timeout=60) as resp:
                text = resp.read().decode("utf-8", "replace")
                status = resp.status
        except urllib.error.HTTPError as exc:
            text = exc.read().decode("utf-8", "replace")
            status = exc.code
        m = _CSRF.search(text)
        if m:
            self.csrf = m.group(1)
        return status, text

    def login(self, username: str) -> None:
        self.get("/login")
        status, _ = self.post("/login", {"username": username, "password": PASSWORD})
        if status != 302:
            raise RuntimeError(f"login of {username} answered {status}")
        self.get("/")


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    def redirect_request(self, *_a: Any, **_k: Any) -> None:
        return None


def _book_jobs(url: str, client: Client, count: int) -> list[int]:
    """Book ``count`` fresh jobs through the intake form (one per bench operator)."""
    from sqlalchemy import create_engine, text

    eng = create_engine(url.replace("postgresql://", "postgresql+psycopg://", 1))
    with eng.connect() as conn:
        rt = conn.execute(text(
            "SELECT id, customer_id, mass_kg, service_speed_rpm FROM rotor_type "
            "WHERE one_off = :f ORDER BY id"), {"f": False}).first()
        m = conn.execute(text(
            "SELECT id, min_speed_rpm, max_speed_rpm FROM machine WHERE min_mass_kg <= :kg "
            "AND max_mass_kg >= :kg ORDER BY id"), {"kg": rt.mass_kg}).first()
    eng.dispose()
    speed = max(m.min_speed_rpm, min(rt.service_speed_rpm, m.max_speed_rpm) * 0.5)
    ids = []
    for i in range(count):
        _, form = client.get("/jobs/new")
        status, _ = client.post("/jobs/new", {
            "form_token": _hidden(form, "form_token"),
            "customer_id": str(rt.customer_id),
            "serial_number": f"BENCH-{i}-{secrets.token_hex(2)}",
            "rotor_type_id": str(rt.id), "machine_id": str(m.id),
            "balancing_speed_rpm": f"{speed:.0f}", "tolerance_method": "grade",
            "tolerance_grade": "6.3", "received_on": time.strftime("%Y-%m-%d"),
            "one_off-kind": "other", "one_off-method_1": "add"})
        if status != 302:
            raise RuntimeError(f"booking a bench job answered {status}")
        _, page = client.get("/jobs")
        job_id = max(int(x) for x in re.findall(r'href="/jobs/(\d+)"', page))
        # A check run needs the job's initial run first, as at the machine.
        status = _post_run(client, job_id, "initial")
        if status != 302:
            raise RuntimeError(f"the initial run of a bench job answered {status}")
        ids.append(job_id)
    return ids


def _hidden(page: str, name: str) -> str:
    """The value of a hidden field the page drew (a create form's one-time token)."""
    m = re.search(rf'name="{re.escape(name)}"[^>]*value="([^"]*)"', page)
    return m.group(1) if m else ""


def _mix(client: Client, job_id: int, owner: Client, step: int) -> tuple[str, int]:
    kind = step % 5
    if kind == 0:
        return "job", client.get(f"/jobs/{job_id}")[0]
    if kind == 1:
        return "list", client.get("/jobs?q=a")[0]
    if kind == 2:
        return "dashboard", owner.get("/dashboard")[0]
    if kind == 3:
        return "home", client.get("/")[0]
    return "post", _post_run(client, job_id, "check")


def _post_run(client: Client, job_id: int, purpose: str) -> int:
    """Open the job page and log a run of ``purpose`` through its form; the status."""
    _, page = client.get(f"/jobs/{job_id}")
    speed = re.search(r'name="run-speed_rpm"[^>]*value="([^"]*)"', page)
    # The form starts in the machine's unit (the only one it accepts): take the selected one.
    select = re.search(r'<select[^>]*name="run-unit"[^>]*>(.*?)</select>', page, re.S)
    unit = select and re.search(r'<option(?=[^>]*\bselected\b)[^>]*value="([^"]+)"',
                                select.group(1))
    status, _ = client.post(f"/jobs/{job_id}/runs", {
        "run-form_token": _hidden(page, "run-form_token"),
        "run-purpose": purpose, "run-speed_rpm": speed.group(1) if speed else "600",
        "run-unit": unit.group(1) if unit else "um",
        "run-amplitude_1": "1.5", "run-angle_1_deg": "10",
        "run-amplitude_2": "1.2", "run-angle_2_deg": "200"})
    return status


def _measure(base: str, users: int, seconds: float, jobs: list[int],
             think_s: float = 0.0) -> dict[str, Any]:
    """The mix by ``users`` people for ``seconds``; ``think_s``: each person's mean pause
    between requests (exponential, seeded per person), none when 0."""
    clients = []
    for i in range(users):
        c = Client(base)
        c.login(f"bench{i}")
        clients.append(c)
    owners = []
    for _ in range(users):
        o = Client(base)
        o.login("benchowner")
        owners.append(o)
    times: list[float] = []
    statuses: list[int] = []
    posted: list[int] = [0]
    lock = threading.Lock()
    stop_at = time.monotonic() + seconds

    def work(i: int) -> None:
        step = i
        pauses = random.Random(i)
        for _ in range(MAX_REQUESTS_PER_USER):
            if think_s > 0:
                time.sleep(min(pauses.expovariate(1.0 / think_s), 10 * think_s))
            if time.monotonic() > stop_at:
                break
            t0 = time.perf_counter()
            kind, status = _mix(clients[i], jobs[i % len(jobs)], owners[i], step)
            dt = time.perf_counter() - t0
            with lock:
                times.append(dt)
                statuses.append(status)
                if kind == "post" and status == 302:
                    posted[0] += 1
            step += 1

    threads = [threading.Thread(target=work, args=(i,)) for i in range(users)]
    t_start = time.perf_counter()
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=seconds + 120)
    elapsed = time.perf_counter() - t_start
    ms = sorted(x * 1000 for x in times)

    def pct(p: float) -> float:
        return round(ms[min(len(ms) - 1, int(p / 100 * len(ms)))], 1) if ms else 0.0

    errors = sum(1 for s in statuses if s not in (200, 302))
    return {"requests": len(ms), "errors": errors, "req_per_s": round(len(ms) / elapsed, 1),
            "p50_ms": pct(50), "p95_ms": pct(95), "p99_ms": pct(99),
            "median_ms": round(statistics.median(ms), 1) if ms else 0.0,
            "runs_posted": posted[0]}


def _floor(base: str, seconds: float) -> float:
    c = Client(base)
    ms = []
    stop_at = time.monotonic() + seconds
    for _ in range(MAX_REQUESTS_PER_USER):
        if time.monotonic() > stop_at:
            break
        t0 = time.perf_counter()
        c.get("/healthz")
        ms.append((time.perf_counter() - t0) * 1000)
    return round(statistics.median(ms), 2)


def _stored_runs(url: str, job_ids: list[int]) -> tuple[int, bool]:
    from sqlalchemy import create_engine, text

    eng = create_engine(url.replace("postgresql://", "postgresql+psycopg://", 1))
    total, gapless = 0, True
    with eng.connect() as conn:
        for job_id in job_ids:
            seqs = [r[0] for r in conn.execute(
                text("SELECT seq FROM run WHERE job_id = :j ORDER BY seq"), {"j": job_id})]
            total += len(seqs)
            gapless = gapless and seqs == list(range(1, len(seqs) + 1))
    eng.dispose()
    return total, gapless


def _rss_kb(pid: int) -> int:
    """Peak resident memory of ``pid`` and its child processes (gunicorn's workers), kB;
    read while they still run."""
    total = 0
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                total += int(line.split()[1])
        children = Path(f"/proc/{pid}/task/{pid}/children").read_text().split()
    except OSError:  # the process ended: nothing left to read
        return total
    return total + sum(_rss_kb(int(c)) for c in children)


def _start(kind: str, port: int, env: dict[str, str]) -> subprocess.Popen[bytes]:
    workers = "2" if kind == "gunicorn" else "1"
    cmd = [SHOPAPP, "serve", "--host", "127.0.0.1", "--port", str(port), "--workers", workers,
           "--threads", "4"]
    return subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def bench(backend: str, url: str, kind: str = "waitress") -> dict[str, Any]:
    with tempfile.TemporaryDirectory(prefix="shopapp-bench-load-") as tmp:
        instance = Path(tmp)
        env = _env(instance, url)
        _prepare(env)
        port = _free_port()
        server = _start(kind, port, env)
        base = f"http://127.0.0.1:{port}"
        try:
            deadline = time.monotonic() + 120
            while time.monotonic() < deadline:
                try:
                    urllib.request.urlopen(base + "/healthz", timeout=5)
                    break
                # Refused before the socket is bound; a read timeout while gunicorn's
                # workers still import the app (the master accepts already).
                except OSError:
                    time.sleep(0.2)
            probe = Client(base)
            probe.login("bench0")
            jobs = _book_jobs(url, probe, USERS)
            before, _ = _stored_runs(url, jobs)
            single = _measure(base, 1, min(SECONDS / 2, 10.0), jobs)
            load = _measure(base, USERS, SECONDS, jobs)
            paced = _measure(base, USERS, SECONDS, jobs, think_s=THINK_SECONDS)
            floor_ms = _floor(base, 3.0)
            after, gapless = _stored_runs(url, jobs)
            rss = _rss_kb(server.pid)
        finally:
            server.terminate()
            server.wait(timeout=30)
    posted = single["runs_posted"] + load["runs_posted"] + paced["runs_posted"]
    median = single["median_ms"]
    ratio = round(load["p95_ms"] / median, 2) if median else None
    paced_ratio = round(paced["p95_ms"] / median, 2) if median else None
    errors = single["errors"] + load["errors"] + paced["errors"]
    return {"load": {
        "backend": backend, "server": SERVERS[kind], "users": USERS,
        "seconds": SECONDS, "single_user": single, "under_load": load,
        "paced": {"think_seconds_mean": THINK_SECONDS, **paced},
        "floor_healthz_median_ms": floor_ms,
        "runs_posted": posted, "runs_stored": after - before,
        "lost_rows": posted - (after - before),
        "run_numbers_gapless": gapless, "server_peak_rss_mb": round(rss / 1024, 1),
        "p95_over_single_median": ratio, "paced_p95_over_single_median": paced_ratio,
        "goal": f"<= {GOAL_P95_RATIO}, 0 errors, 0 lost rows",
        "met": bool(ratio is not None and ratio <= GOAL_P95_RATIO and errors == 0
                    and posted == after - before and gapless),
        "met_paced": bool(paced_ratio is not None and paced_ratio <= GOAL_P95_RATIO
                          and errors == 0 and posted == after - before and gapless),
    }}


def _ratios(result: dict[str, Any]) -> list[dict[str, Any]]:
    r = result["load"]
    name = f"load_{r['backend']}_{r['server'].split(',')[0]}"
    errors = r["single_user"]["errors"] + r["under_load"]["errors"] + r["paced"]["errors"]
    out = [bench_shop.ratio(f"{name}_errors", errors, 0),
           bench_shop.ratio(f"{name}_lost_rows", r["lost_rows"], 0)]
    if r["p95_over_single_median"] is not None:
        out.append(bench_shop.ratio(f"{name}_p95_over_single_median",
                                    r["p95_over_single_median"], GOAL_P95_RATIO))
        out.append(bench_shop.ratio(f"{name}_paced_p95_over_single_median",
                                    r["paced_p95_over_single_median"], GOAL_P95_RATIO))
    return out


def main() -> dict[str, Any]:
    """Print one JSON object per backend and server; return their ratios and goals."""
    kinds = list(SERVERS)
    backends = [("sqlite", None)]
    pg = os.environ.get("SHOPAPP_BENCH_POSTGRES_URL")
    if pg:
        backends.append(("postgresql", pg))
    else:
        print(json.dumps({"load": {"backend": "postgresql",
                                   "skipped": "set SHOPAPP_BENCH_POSTGRES_URL to an empty "
                                              "database to measure it"}}))
    results = []
    for backend, url in backends:
        for n, kind in enumerate(kinds):
            if url is None:
                with tempfile.TemporaryDirectory(prefix="shopapp-bench-db-") as tmp:
                    result = bench(backend, f"sqlite:///{tmp}/bench.sqlite3", kind)
            else:
                _empty(url, first=n == 0)
                result = bench(backend, url, kind)
            print(json.dumps(result))
            results.append(result)
    return {"runs": results, "ratios": [x for r in results for x in _ratios(r)]}


def _empty(url: str, first: bool) -> None:
    """A fresh shop for each server in the PostgreSQL bench database: before the first
    run it must hold no table (the bench refuses to touch a database in use); between
    runs the tables the bench created are dropped."""
    from sqlalchemy import create_engine, inspect, text

    from shopapp.models import Base

    eng = create_engine(url.replace("postgresql://", "postgresql+psycopg://", 1))
    try:
        tables = inspect(eng).get_table_names()
        if first and tables:
            raise SystemExit(f"scripts/bench load: SHOPAPP_BENCH_POSTGRES_URL holds {len(tables)} "
                             "tables; give it an empty database of its own")
        Base.metadata.drop_all(eng)
        with eng.begin() as conn:
            conn.execute(text("DROP TABLE IF EXISTS alembic_version"))
    finally:
        eng.dispose()


if __name__ == "__main__":
    main()
