"""``shopapp report shop --month 2026-10 --output FILE.pdf`` / ``--json``: the monthly report.

The PDF is the same two-page report as the dashboard's button; ``--json`` prints the
same figures keyed by the measure names (see ``shopapp.measures.services``), so they
can be checked and scripted. Every rate is an object ``{"value", "numerator",
"denominator", "interval_95": [low, high]}``; ``changes`` says how each rate moved
(and by which test), ``funnel_flags`` lists the units outside the funnel limits.
"""

from __future__ import annotations

import datetime as dt
import json
from pathlib import Path

import click
from flask import current_app
from flask.cli import with_appcontext

from shopapp.cli.common import app_db, one_line_errors
from shopapp.measures import monthly
from shopapp.measures import services as measures
from shopapp.measures.costs import cost_settings
from shopapp.measures.periods import parse_month


@click.command("shop")
@click.option("--month", required=True, metavar="YYYY-MM", help="The month, e.g. 2026-10.")
@click.option("--output", "-o", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="PDF file to write.")
@click.option("--json", "as_json", is_flag=True, help="Print the figures as JSON.")
@click.option("--as-of", "as_of", type=click.DateTime(formats=["%Y-%m-%d"]), default=None,
              help="Count work in progress and machine verification as of this day "
                   "(YYYY-MM-DD; default today).")
@with_appcontext
@one_line_errors
def shop_command(month: str, output: Path | None, as_json: bool,
                 as_of: dt.datetime | None) -> None:
    """The month's shop measures as a two-page PDF (--output) and/or JSON (--json)."""
    if output is None and not as_json:
        raise click.UsageError("give --output FILE.pdf, --json, or both")
    period = parse_month(month)
    today = as_of.date() if as_of else dt.date.today()
    with app_db().session() as sess:
        report = measures.shop_report(sess, period, by=None, today=today,
                                      costs=cost_settings(current_app.config))
    if output is not None:
        output.parent.mkdir(parents=True, exist_ok=True)
        output.write_bytes(monthly.render(report))
        if not as_json:
            click.echo(f"wrote {output}: shop report {period.label}")
    if as_json:
        click.echo(json.dumps(report.to_json(), indent=2, ensure_ascii=False))
