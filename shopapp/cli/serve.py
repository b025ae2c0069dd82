"""``shopapp serve``: the production WSGI server.

Several people at the machines need several server processes: the app's work is Python,
and the threads of one process take turns on one interpreter lock. On Linux and other
Unix systems the default is therefore :data:`DEFAULT_WORKERS` gunicorn processes, each
answering on ``--threads`` threads; ``--workers 1`` serves from one waitress process (the
only choice on Windows, where gunicorn does not run). Every process keeps its state in
the database (sessions are signed cookies, the log-in throttle is a table), so a request
may land on any of them.
"""

from __future__ import annotations

import logging
import sys
from typing import Any

import click

from shopapp.cli.common import one_line_errors

log = logging.getLogger("shopapp.serve")

#: gunicorn needs fork() and Unix sockets; on Windows one waitress process serves.
MULTI_PROCESS = sys.platform != "win32"
#: Two processes: on the two-core machine the load bench runs on, 8 people pausing about a
#: second between requests then wait at the 95th percentile under 4 times what one person
#: alone waits (README, "Tests and benchmarks"); one waitress process does not.
DEFAULT_WORKERS = 2 if MULTI_PROCESS else 1


def gunicorn_options(host: str, port: int, workers: int, threads: int,
                     log_level: str = "INFO") -> dict[str, Any]:
    """gunicorn's settings for ``shopapp serve``: threaded workers, so one slow page (a
    year's dashboard, a PDF) holds one thread, not a whole process."""
    bind = f"[{host}]:{port}" if ":" in host else f"{host}:{port}"
    return {"bind": [bind], "workers": workers, "worker_class": "gthread",
            "threads": threads, "proc_name": "shopapp",
            # gunicorn's own lines (workers booting, exiting) at the app's LOG_LEVEL.
            "loglevel": log_level.lower(),
            # The heartbeat a worker's main loop sends while its threads answer: a long
            # request (an audit ZIP) does not stop it, so silence this long is a stuck process.
            "timeout": 120, "graceful_timeout": 30,
            # No admin socket in the user's home: two shops on one server would share it,
            # and stopping is a signal to the master (Ctrl-C, SIGTERM) as with waitress.
            "control_socket_disable": True}


def _serve_with_gunicorn(options: dict[str, Any]) -> None:
    from gunicorn.app.base import BaseApplication

    class ShopappServer(BaseApplication):  # type: ignore[misc]  # gunicorn has no types
        def load_config(self) -> None:
            for key, value in options.items():
                self.cfg.set(key, value)

        def load(self) -> Any:
            # Each worker builds its own app after the fork: no database connection is
            # shared between processes.
            from shopapp import create_app

            return create_app()

    ShopappServer().run()


@click.command("serve", help=(
    "Serve the web app: several gunicorn processes on Linux/Unix (--workers), "
    "one waitress process with --workers 1 or on Windows."))
@click.option("--host", default="127.0.0.1", show_default=True)
@click.option("--port", default=5000, show_default=True, type=click.IntRange(1, 65535))
@click.option("--workers", default=DEFAULT_WORKERS, show_default=True,
              type=click.IntRange(1, 32),
              help="server processes (more than 1 needs Linux or another Unix system)")
@click.option("--threads", default=4, show_default=True, type=click.IntRange(1, 64),
              help="threads per process")
@one_line_errors
def serve(host: str, port: int, workers: int, threads: int) -> None:
    from shopapp import create_app

    if workers > 1 and not MULTI_PROCESS:
        raise click.BadParameter(
            "more than one server process needs gunicorn, which runs on Linux and other "
            "Unix systems only; serve with --workers 1 here", param_hint="'--workers'")
    # Built here once even when the workers build their own: a wrong setting or an
    # unreachable database is reported on one line before any process starts.
    app = create_app()
    backend = app.extensions["shopapp.db"].backend
    app.extensions["shopapp.db"].dispose()
    server = (f"{workers} gunicorn processes × {threads} threads" if workers > 1
              else f"waitress, {threads} threads")
    log.info("serving on http://%s:%d (database: %s; %s)", host, port, backend, server)
    if workers > 1:
        _serve_with_gunicorn(gunicorn_options(host, port, workers, threads,
                                              str(app.config.get("LOG_LEVEL", "INFO"))))
        return
    import waitress

    waitress.serve(app, host=host, port=port, threads=threads, ident="shopapp")
