"""``shopapp report …``: certificates and rotor histories as PDF files, and checking a PDF.

- ``report certificate NUMBER [--revision N] --output FILE.pdf`` writes the stored PDF.
- ``report verify FILE.pdf [--offline]`` checks the file itself (its signature with
  pyHanko, against the shop's signer certificates when the instance folder has them, and
  that the embedded ``certificate-data.json`` is the data whose hash is printed) and, when
  a database is configured and reachable, looks its bytes up in the register (valid,
  void, superseded or unknown). Exit status 0 only for a proven, valid certificate.
- ``report rotor-history SERIAL [--customer NAME] --output FILE.pdf``.

Other areas add their report commands with ``report_group.add_command``.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import click
from flask import current_app
from flask.cli import with_appcontext
from sqlalchemy.engine import make_url
from sqlalchemy.exc import SQLAlchemyError

from shopapp.certificates import pdfsign, register, signing
from shopapp.certificates import queries as certificates
from shopapp.cli.common import app_db, one_line_errors
from shopapp.cli.report_shop import shop_command
from shopapp.core.display import counted
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


def _register_answer(pdf: bytes) -> tuple[register.Verification | None, str]:
    """The register's answer for ``pdf``, or None and why the database was not asked."""
    url = make_url(str(current_app.config.get("DATABASE_URL") or ""))
    sqlite_file = url.database if url.get_backend_name() == "sqlite" else None
    if sqlite_file not in (None, "", ":memory:") and not Path(str(sqlite_file)).is_file():
        return None, f"no database at {sqlite_file}"
    try:
        with app_db().session() as sess:
            result, remark = register.verify_file(sess, pdf)
    except SQLAlchemyError as exc:
        first = str(getattr(exc, "orig", exc)).strip().splitlines()
        return None, f"database not reachable ({first[0] if first else 'error'})"
    return result, remark


@report_group.command("verify")
@click.argument("file", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@click.option("--offline", is_flag=True,
              help="Check only the file itself (signature and embedded data), no database.")
@with_appcontext
@one_line_errors
def verify_command(file: Path, offline: bool) -> None:
    """Check a certificate PDF: its signature and embedded data, and (with a database) the
    register. Exit 0 only when the file is proven and, with a database, valid."""
    pdf = file.read_bytes()
    known = signing.known_certificates(signing.signing_folder(current_app.instance_path))
    proof = pdfsign.inspect(pdf, known or None)
    result, remark = (None, "offline") if offline else _register_answer(pdf)
    if result is not None:
        click.echo(f"{result.status}: {result.message}")
        for label, value in result.lines:
            click.echo(f"  {label}: {value}")
        if remark:
            click.echo(remark)
    for label, text in proof.lines():
        click.echo(f"{label}: {text}")
    if result is None:
        click.echo(f"register: not consulted ({remark}); the file alone was checked")
    click.echo(f"  file sha256: {hashlib.sha256(pdf).hexdigest()}")
    file_ok = proof.proven and proof.signer_known != "unknown"
    if result is None:
        ok = file_ok
        if proof.era == "before_signing":
            click.echo("issued before signing was introduced: only the register can confirm it "
                       "(run without --offline where the shop's database is reachable)")
    else:
        ok = result.status == "valid" and (proof.era != "signed" or file_ok)
    if not ok:
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
    click.echo(f"wrote {output}: {counted(len(data.visits), 'visit')} of serial "
               f"{data.serial_number} ({data.customer_name})")
    if data.growth_note:
        click.echo(data.growth_note)


# The dashboard's ``report shop`` command lives beside its measures.
report_group.add_command(shop_command)
