"""Configuration: defaults in code, then ``instance/shopapp.toml``, then ``SHOPAPP_*``
environment variables, then the mapping a caller (a test) passes.

A start outside debug/testing without a secret key stops with
:class:`ConfigError`; ``scripts/serve`` writes a random key into ``instance/``
on first run so the two README commands still work.
"""

from __future__ import annotations

import os
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

ENV_PREFIX = "SHOPAPP_"


class ConfigError(RuntimeError):
    """The configuration cannot start the application."""


def default_instance_path() -> Path:
    """The ``instance/`` folder: ``SHOPAPP_INSTANCE_PATH`` or ``./instance``."""
    return Path(os.environ.get("SHOPAPP_INSTANCE_PATH", Path.cwd() / "instance")).resolve()


def defaults(instance_path: Path) -> dict[str, Any]:
    """The built-in defaults. The database is an SQLite file in ``instance/``."""
    return {
        "DATABASE_URL": f"sqlite:///{instance_path / 'shopapp.sqlite3'}",
        "SECRET_KEY": None,
        "DEBUG": False,
        "TESTING": False,
        "SESSION_LIFETIME_MINUTES": 480,
        "SESSION_COOKIE_SECURE": False,
        "LOG_LEVEL": "INFO",
        "PAGE_SIZE": 25,
        "WTF_CSRF_ENABLED": True,
        "SQL_ECHO": False,
    }


def _coerce(raw: str) -> Any:
    """Turn an environment string into bool/int/float where it plainly is one."""
    low = raw.strip().lower()
    if low in {"true", "yes", "on"}:
        return True
    if low in {"false", "no", "off"}:
        return False
    for kind in (int, float):
        try:
            return kind(raw)
        except ValueError:
            pass
    return raw


def load_config(
    overrides: Mapping[str, Any] | None = None,
    *,
    instance_path: Path | None = None,
    environ: Mapping[str, str] | None = None,
) -> dict[str, Any]:
    """Build the configuration in precedence order (later wins).

    defaults → ``instance/shopapp.toml`` → ``SHOPAPP_*`` environment → ``overrides``.
    """
    inst = instance_path or default_instance_path()
    env = os.environ if environ is None else environ
    cfg = defaults(inst)
    toml_file = inst / "shopapp.toml"
    if toml_file.is_file():
        try:
            with toml_file.open("rb") as fh:
                data = tomllib.load(fh)
        except tomllib.TOMLDecodeError as exc:
            raise ConfigError(f"{toml_file}: not valid TOML ({exc})") from None
        cfg.update({k.upper(): v for k, v in data.items()})
    for key, value in env.items():
        if key.startswith(ENV_PREFIX) and key != "SHOPAPP_INSTANCE_PATH":
            cfg[key[len(ENV_PREFIX):]] = _coerce(value)
    if overrides:
        cfg.update(overrides)
    cfg["INSTANCE_PATH"] = str(inst)
    return cfg


def check_config(cfg: Mapping[str, Any]) -> None:
    """Refuse to start production without a secret key."""
    if not cfg.get("REQUIRE_SECRET_KEY", True):
        return
    if not cfg.get("SECRET_KEY") and not (cfg.get("DEBUG") or cfg.get("TESTING")):
        raise ConfigError(
            "SECRET_KEY is not set: set SHOPAPP_SECRET_KEY or secret_key in "
            "instance/shopapp.toml (scripts/serve writes one on first run)"
        )
