"""``shopapp signing show|import|rotate``: the key every certificate PDF is signed with.

The key lives in ``<instance>/signing/`` (mode 600; see
:mod:`shopapp.certificates.signing`). ``import`` makes the shop's own key and
certificate (a password-protected PKCS#12 file) the signer, ``rotate`` makes a new
key; either way the old certificate is kept in ``signing/retired/`` so certificates
signed before still verify. Each change is written to the audit trail when the
database is reachable.
"""

from __future__ import annotations

import sys
from pathlib import Path

import click
from flask import current_app
from flask.cli import with_appcontext
from sqlalchemy.exc import SQLAlchemyError

from shopapp.certificates import signing
from shopapp.cli.common import app_db, one_line_errors
from shopapp.core import audit
from shopapp.core.settings import get_settings


@click.group("signing", help="The shop's certificate signing key: show, import, rotate.")
def signing_group() -> None:
    pass


def _folder() -> Path:
    return signing.signing_folder(current_app.instance_path)


def _describe(info: signing.SignerCertificate, origin: str = "") -> list[str]:
    lines = [f"  subject:     {info.subject}",
             f"  issuer:      {'itself (self-signed)' if info.self_signed else info.issuer}",
             f"  sha256:      {info.fingerprint_groups}",
             f"  valid:       {info.not_before:%Y-%m-%d} to {info.not_after:%Y-%m-%d}"]
    if origin:
        lines.append(f"  origin:      {origin}")
    if info.expires_within(signing.EXPIRY_WARNING_DAYS):
        lines.append("  WARNING:     expires within "
                     f"{signing.EXPIRY_WARNING_DAYS} days: rotate or import a new key")
    return lines


def _audit(action: str, new: signing.SignerCertificate,
           old: signing.SignerCertificate | None) -> None:
    """Record the change in the audit trail (by the server's administrator, no user)."""
    def facts(c: signing.SignerCertificate | None) -> dict[str, str] | None:
        return None if c is None else {"subject": c.subject, "fingerprint": c.fingerprint,
                                       "valid_until": c.not_after.isoformat()}
    try:
        with app_db().session() as sess:
            audit.record(sess, by=None, entity="signing_key", entity_id=None, action=action,
                         before=facts(old), after=facts(new))
            sess.commit()
    except SQLAlchemyError as exc:
        first = str(getattr(exc, "orig", exc)).splitlines()
        click.echo(f"note: not written to the audit trail (database: "
                   f"{first[0] if first else exc.__class__.__name__})")


@signing_group.command("show")
@click.option("--pem", is_flag=True, help="Also print the current signer certificate (PEM).")
@with_appcontext
@one_line_errors
def show(pem: bool) -> None:
    """Which key signs the certificates now, and the retired ones."""
    folder = _folder()
    overview = signing.overview(folder)
    click.echo(f"signing folder: {folder}")
    if overview.current is None:
        click.echo("no signing key yet: one is made when the first certificate is issued "
                   "(or now with 'shopapp signing rotate')")
    else:
        click.echo("signs now:")
        for line in _describe(overview.current, overview.origin):
            click.echo(line)
        if pem:
            key = signing.current_key(folder)
            assert key is not None
            from cryptography.hazmat.primitives import serialization

            click.echo(key.certificate.public_bytes(serialization.Encoding.PEM).decode("ascii"),
                       nl=False)
    for info in overview.retired:
        click.echo("retired (still accepted):")
        for line in _describe(info):
            click.echo(line)


@signing_group.command("import")
@click.argument("file", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@click.option("--password-stdin", is_flag=True, help="Read the PKCS#12 password from stdin.")
@with_appcontext
@one_line_errors
def import_(file: Path, password_stdin: bool) -> None:
    """Sign with the shop's own key and certificate from a PKCS#12 FILE (.p12/.pfx)."""
    if password_stdin:
        password = sys.stdin.readline().rstrip("\r\n")
    else:
        password = click.prompt("PKCS#12 password", hide_input=True, default="",
                                show_default=False)
    if file.stat().st_size > signing.MAX_PKCS12_BYTES:
        raise click.ClickException(f"{file}: {file.stat().st_size} bytes is too large for a "
                                   "PKCS#12 key file")
    key, retired = signing.import_pkcs12(_folder(), file.read_bytes(), password)
    click.echo("imported; signs now:")
    for line in _describe(key.info, key.origin):
        click.echo(line)
    if retired is not None:
        click.echo(f"retired (still accepted): {retired.subject} {retired.fingerprint[:16]}…")
    _audit("import", key.info, retired)


@signing_group.command("rotate")
@click.option("--shop-name", default=None,
              help="Name in the new certificate (default: the shop name in the settings).")
@click.option("--yes", is_flag=True, help="Do not ask for confirmation.")
@with_appcontext
@one_line_errors
def rotate(shop_name: str | None, yes: bool) -> None:
    """Make a new signing key; the current certificate is retired (still accepted)."""
    if shop_name is None:
        try:
            with app_db().session() as sess:
                shop_name = get_settings(sess).shop_name
        except SQLAlchemyError:
            raise click.ClickException("the database is not reachable for the shop name: give "
                                       "--shop-name") from None
    if not yes:
        click.confirm("Make a new signing key for the certificates issued from now on?",
                      abort=True)
    key, retired = signing.rotate(_folder(), shop_name)
    click.echo("new signing key; signs now:")
    for line in _describe(key.info, key.origin):
        click.echo(line)
    if retired is not None:
        click.echo(f"retired (still accepted): {retired.subject} {retired.fingerprint[:16]}…")
    _audit("rotate", key.info, retired)
