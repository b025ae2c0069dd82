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

from shopapp.cli.common import Day, app_db, one_line_errors
from shopapp.core.checks import QUERY_AHEAD_DAYS, day_refusal
from shopapp.core.clock import shop_today
from shopapp.measures import monthly
from shopapp.measures import services as measures
from shopapp.measures.costs import cost_settings
from shopapp.measures.periods import parse_month


@click.command("shop")
@click.option("--month", required=True, metavar="YYYY-MM", help="The month, e.g. 2026-10.")
@click.option("--output", "-o", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="PDF file to write.")
@click.option("--json", "as_json", is_flag=True, help="Print the figures as JSON.")
@click.option("--as-of", "as_of", type=Day(ahead_days=QUERY_AHEAD_DAYS), default=None,
              help="Count work in progress and machine verification as of this day "
                   "(YYYY-MM-DD; default today).")
@with_appcontext
@one_line_errors
def shop_command(month: str, output: Path | None, as_json: bool,
                 as_of: dt.date | None) -> None:
    """The month's shop measures as a two-page PDF (--output) and/or JSON (--json)."""
    if output is None and not as_json:
        raise click.UsageError("give --output FILE.pdf, --json, or both")
    period = parse_month(month)
    refusal = day_refusal(period.start, ahead_days=QUERY_AHEAD_DAYS)
    if refusal is not None:
        raise click.BadParameter(f"the month starts on {refusal}", param_hint="--month")
    today = as_of or shop_today()
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
