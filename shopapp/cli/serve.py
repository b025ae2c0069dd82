"""``shopapp serve``: the production WSGI server (waitress)."""

from __future__ import annotations

import logging

import click

from shopapp.cli.common import one_line_errors

log = logging.getLogger("shopapp.serve")


@click.command("serve", help="Serve the web app with waitress.")
@click.option("--host", default="127.0.0.1", show_default=True)
@click.option("--port", default=5000, show_default=True, type=click.IntRange(1, 65535))
@click.option("--threads", default=4, show_default=True, type=click.IntRange(1, 64))
@one_line_errors
def serve(host: str, port: int, threads: int) -> None:
    import waitress

    from shopapp import create_app

    app = create_app()
    log.info("serving on http://%s:%d (database: %s)", host, port,
             app.extensions["shopapp.db"].backend)
    waitress.serve(app, host=host, port=port, threads=threads, ident="shopapp")
