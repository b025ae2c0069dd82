"""``shopapp calc KIND [--json] [--input FILE]``: balancing calculations as JSON in, JSON out.

Reads one JSON object (stdin, or ``--input FILE``), runs one calculation of
:mod:`shopapp.balancing` and prints one JSON object (``--json``) or a readable
table. Bad input ends with exit code 2 and one line on stderr naming the field
and the reason. Angles are degrees in the direction of rotation; masses are at
the trial radius unless a radius is given. The key names are an interface that
scripts depend on: add keys, never rename them.
"""

from __future__ import annotations

import json
import sys
from collections.abc import Iterator
from typing import Any

import click

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.numtext import short
from shopapp.core.calc.input import Response
from shopapp.core.calc.input import path as _path
from shopapp.core.calc.kinds import KINDS, run

__all__ = ["KINDS", "calc_command", "run"]

EXIT_BAD_INPUT = 2
EXIT_FAILED = 1


def _flatten(obj: Any, prefix: str = "") -> Iterator[tuple[str, str]]:
    if isinstance(obj, dict):
        for key, value in obj.items():
            yield from _flatten(value, _path(prefix, key))
    elif isinstance(obj, list):
        if not obj:
            yield prefix, "-"
        for k, value in enumerate(obj):
            yield from _flatten(value, _path(prefix, k))
    elif isinstance(obj, float):
        yield prefix, f"{short(obj)}"
    elif obj is None:
        yield prefix, "-"
    else:
        yield prefix, str(obj)


def _table(response: Response) -> str:
    rows = list(_flatten(response))
    width = max((len(k) for k, _ in rows), default=0)
    return "\n".join(f"{k.ljust(width)}  {v}" for k, v in rows)


# --------------------------------------------------------------------------- command


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def _fail(field: str, message: str, code: int = EXIT_BAD_INPUT) -> None:
    click.echo(f"error: {_one_line(field)}: {_one_line(message)}", err=True)
    sys.exit(code)


def _help() -> str:
    lines = [
        "Run one balancing calculation: read a JSON request on stdin (or --input FILE) "
        "and print the answer (a JSON object with --json, else a table). Bad input ends "
        "with exit code 2 and one line naming the field.",
        "",
        "\b",
        "KIND is one of:",
    ]
    for name, func in KINDS.items():
        lines.append(f"  {name:<16} {(func.__doc__ or '').strip().splitlines()[0]}")
    return "\n".join(lines)


@click.command("calc", help=_help())
@click.argument("kind")
@click.option("--json", "as_json", is_flag=True, help="Print the answer as one JSON object.")
@click.option(
    "--input", "input_path", default=None, metavar="FILE", help="Read the request from FILE."
)
def calc_command(kind: str, as_json: bool, input_path: str | None) -> None:
    """``shopapp calc KIND [--json] [--input FILE]``."""
    try:
        if input_path is None:
            text = sys.stdin.read()
        else:
            with open(input_path, encoding="utf-8") as fh:
                text = fh.read()
    except (OSError, UnicodeDecodeError) as exc:
        _fail("input", f"cannot read {input_path or 'stdin'}: {exc}")
        return
    try:
        response = run(kind, text)
    except BalancingInputError as exc:
        _fail(exc.field, exc.message)
        return
    except RecursionError:
        _fail("request", "is nested too deeply")
        return
    except Exception as exc:  # a calculation must never end in a traceback
        _fail("calculation", f"failed unexpectedly ({type(exc).__name__}: {exc})", EXIT_FAILED)
        return
    if as_json:
        click.echo(json.dumps(response, allow_nan=False))
    else:
        click.echo(_table(response))
