"""``shopapp serve``: several server processes on Linux, one waitress process on request.

The real server is started as a subprocess on a free loopback port over a fresh SQLite
file; every wait is bounded.
"""

from __future__ import annotations

import http.cookiejar
import importlib
import os
import re
import secrets
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.parse
import urllib.request
from pathlib import Path

import pytest
from click.testing import CliRunner

from shopapp.cli import main

serve_module = importlib.import_module("shopapp.cli.serve")

SHOPAPP = str(Path(sys.executable).with_name("shopapp"))
PASSWORD = "serve-test-" + secrets.token_hex(6)
_CSRF = re.compile(r'name="csrf_token"[^>]*value="([^"]+)"')


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _start(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, *args: str
           ) -> tuple[subprocess.Popen[str], str]:
    env = {"SHOPAPP_INSTANCE_PATH": str(tmp_path),
           "SHOPAPP_DATABASE_URL": f"sqlite:///{tmp_path}/shop.sqlite3",
           "SHOPAPP_SECRET_KEY": secrets.token_hex(16)}
    for name, value in env.items():
        monkeypatch.setenv(name, value)
    # The database and its one user are made in this process (a command's start-up costs
    # seconds); only the server runs apart.
    runner = CliRunner()
    for cmd, stdin in ((["db", "upgrade"], None),
                       (["user", "add", "kit", "--role", "operator", "--password-stdin"],
                        PASSWORD + "\n")):
        done = runner.invoke(main, cmd, input=stdin)
        assert done.exit_code == 0, done.output
    port = _free_port()
    server = subprocess.Popen([SHOPAPP, "serve", "--port", str(port), *args],
                              env=dict(os.environ),
                              stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
                              start_new_session=True)
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 60
    while True:
        try:
            urllib.request.urlopen(base + "/healthz", timeout=5)
            return server, base
        except OSError:
            if server.poll() is not None or time.monotonic() > deadline:
                _stop(server)
                pytest.fail(f"the server did not answer: {server.stdout.read()}")  # type: ignore[union-attr]
            time.sleep(0.2)


def _stop(server: subprocess.Popen[str]) -> str:
    if server.poll() is None:
        os.killpg(server.pid, signal.SIGTERM)
    try:
        out, _ = server.communicate(timeout=40)
    except subprocess.TimeoutExpired:
        os.killpg(server.pid, signal.SIGKILL)
        out, _ = server.communicate(timeout=10)
    return out


def _log_in(base: str) -> urllib.request.OpenerDirector:
    opener = urllib.request.build_opener(
        urllib.request.HTTPCookieProcessor(http.cookiejar.CookieJar()))
    page = opener.open(base + "/login", timeout=10).read().decode()
    token = _CSRF.search(page)
    assert token is not None
    data = urllib.parse.urlencode({"csrf_token": token.group(1), "username": "kit",
                                   "password": PASSWORD}).encode()
    opener.open(base + "/login", data=data, timeout=10)
    return opener


@pytest.mark.skipif(sys.platform == "win32", reason="gunicorn runs on Linux/Unix only")
def test_serve_answers_from_two_processes_and_a_login_holds_on_both(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    server, base = _start(tmp_path, monkeypatch)  # the default: DEFAULT_WORKERS processes
    try:
        opener = _log_in(base)
        # Each request may land on either process: the session is a signed cookie and
        # every page below needs it (a lost session would redirect to /login).
        for _ in range(12):
            with opener.open(base + "/jobs", timeout=10) as page:
                assert page.status == 200
                assert "/login" not in page.url
    finally:
        out = _stop(server)
    assert serve_module.DEFAULT_WORKERS == 2
    assert out.count("Booting worker with pid") == 2, out
    assert "2 gunicorn processes × 4 threads" in out


def test_serve_with_one_worker_is_waitress(tmp_path: Path,
                                           monkeypatch: pytest.MonkeyPatch) -> None:
    server, base = _start(tmp_path, monkeypatch, "--workers", "1")
    try:
        with _log_in(base).open(base + "/jobs", timeout=10) as page:
            assert page.status == 200 and "/login" not in page.url
    finally:
        out = _stop(server)
    assert "waitress, 4 threads" in out
    assert "gunicorn" not in out.lower()


def test_more_than_one_worker_is_refused_where_gunicorn_cannot_run(monkeypatch) -> None:
    monkeypatch.setattr(serve_module, "MULTI_PROCESS", False)
    result = CliRunner().invoke(main, ["serve", "--workers", "2"])
    assert result.exit_code == 2
    assert "--workers" in result.output and "Linux" in result.output


def test_zero_workers_is_refused_naming_the_option() -> None:
    result = CliRunner().invoke(main, ["serve", "--workers", "0"])
    assert result.exit_code == 2
    assert "--workers" in result.output
