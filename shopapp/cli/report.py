"""``shopapp report …``: certificates and rotor histories as PDF files, and checking a PDF.

- ``report certificate NUMBER [--revision N] --output FILE.pdf`` writes the stored PDF.
- ``report verify FILE.pdf`` hashes the file and looks it up: prints valid, void,
  superseded or unknown; exit status 0 only for a valid certificate.
- ``report rotor-history SERIAL [--customer NAME] --output FILE.pdf``.

Other areas add their report commands with ``report_group.add_command``.
"""

from __future__ import annotations

from pathlib import Path

import click
from flask.cli import with_appcontext

from shopapp.certificates import queries as certificates
from shopapp.certificates import register
from shopapp.cli.common import app_db, one_line_errors
from shopapp.cli.report_shop import shop_command
from shopapp.jobs import rotor_history
from shopapp.reports import rotor_history as history_report

EXIT_NOT_VALID = 1


@click.group("report", help="Certificates and reports as PDF files; check a certificate PDF.")
def report_group() -> None:
    pass


def _write(path: Path, data: bytes) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(data)


@report_group.command("certificate")
@click.argument("number")
@click.option("--revision", type=click.IntRange(min=1), default=None,
              help="Revision to write (default: the latest).")
@click.option("--output", "-o", type=click.Path(dir_okay=False, path_type=Path), required=True,
              help="PDF file to write.")
@with_appcontext
@one_line_errors
def certificate_command(number: str, revision: int | None, output: Path) -> None:
    """Write certificate NUMBER (as stored, byte for byte) to a PDF file."""
    with app_db().session() as sess:
        cert = certificates.by_number(sess, number, revision)
        _write(output, cert.pdf)
        state = "valid" if cert.state == "issued" else f"void ({cert.void_reason})"
        click.echo(f"wrote {output}: {cert.number} revision {cert.revision}, {state}, "
                   f"sha256 {cert.pdf_sha256}")


@report_group.command("verify")
@click.argument("file", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@with_appcontext
@one_line_errors
def verify_command(file: Path) -> None:
    """Check a certificate PDF: hash its bytes and look them up (exit 0 only when valid)."""
    pdf = file.read_bytes()
    with app_db().session() as sess:
        result, remark = register.verify_file(sess, pdf)
    click.echo(f"{result.status}: {result.message}")
    for label, value in result.lines:
        click.echo(f"  {label}: {value}")
    if remark:
        click.echo(remark)
    click.echo(f"  file sha256: {result.query}")
    if result.status != "valid":
        click.get_current_context().exit(EXIT_NOT_VALID)


@report_group.command("rotor-history")
@click.argument("serial")
@click.option("--customer", default=None, help="Customer name, when the serial exists at several.")
@click.option("--output", "-o", type=click.Path(dir_okay=False, path_type=Path), required=True,
              help="PDF file to write.")
@with_appcontext
@one_line_errors
def rotor_history_command(serial: str, customer: str | None, output: Path) -> None:
    """Write the history of rotor SERIAL (every job, trend chart, growth note) to a PDF."""
    with app_db().session() as sess:
        rotor = rotor_history.find_rotor(sess, serial, customer=customer)
        data = rotor_history.build(sess, rotor)
    _write(output, history_report.render(data))
    click.echo(f"wrote {output}: {len(data.visits)} visit(s) of serial {data.serial_number} "
               f"({data.customer_name})")
    if data.growth_note:
        click.echo(data.growth_note)


# The dashboard's ``report shop`` command lives beside its measures.
report_group.add_command(shop_command)
