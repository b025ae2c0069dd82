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
        "TRUSTED_PROXIES": 0,
    }


# The type of every setting shopapp knows. Environment values are strings; each is
# turned into its key's type here (a secret is always a string, even "12345").
KEY_TYPES: dict[str, type] = {
    "DATABASE_URL": str,
    "SECRET_KEY": str,
    "DEBUG": bool,
    "TESTING": bool,
    "SESSION_LIFETIME_MINUTES": int,
    "SESSION_COOKIE_SECURE": bool,
    "LOG_LEVEL": str,
    "PAGE_SIZE": int,
    "WTF_CSRF_ENABLED": bool,
    "SQL_ECHO": bool,
    "REQUIRE_SECRET_KEY": bool,
    "BASE_URL": str,
    # Reverse proxies in front of shopapp whose X-Forwarded-For is believed (0: none, the
    # client is the connection's address). The log-in throttle counts per client address.
    "TRUSTED_PROXIES": int,
    "VERIFY_REQUESTS_PER_MINUTE": int,  # /verify rate limit per client address and process
    "ROTOR_TAG_SIZE_MM": str,  # rotor tag label, width x height in mm, e.g. "62x29"
    # The owner's view (shopapp.measures.costs): money per machine hour, the longest
    # gap between two runs counted in full as machine time, and the money unit shown.
    "MACHINE_HOURLY_RATE": float,
    "MACHINE_IDLE_MINUTES": float,
    "MONEY_UNIT": str,
    # The IANA zone of the shop's days (shopapp.core.clock); unset: the server's local zone.
    "TIME_ZONE": str,
}
_TRUE = {"1", "true", "yes", "on"}
_FALSE = {"0", "false", "no", "off", ""}


def _typed(key: str, raw: str, source: str) -> Any:
    """``raw`` as the type of setting ``key``; unknown keys stay strings."""
    kind = KEY_TYPES.get(key, str)
    if kind is str:
        return raw
    low = raw.strip().lower()
    if kind is bool:
        if low in _TRUE:
            return True
        if low in _FALSE:
            return False
        raise ConfigError(f"{source}: {raw!r} is not a yes/no value (use true or false)")
    try:
        return kind(raw.strip())
    except ValueError:
        what = "a number" if kind is float else "a whole number"
        raise ConfigError(f"{source}: {raw!r} is not {what}") from None


def load_config(
    overrides: Mapping[str, Any] | None = None,
    *,
    instance_path: Path | None = None,
    environ: Mapping[str, str] | None = None,
) -> dict[str, Any]:
    """Build the configuration in precedence order (later wins).

    defaults → ``<instance>/shopapp.toml`` → ``SHOPAPP_*`` environment → ``overrides``.
    The instance folder is ``overrides["INSTANCE_PATH"]`` when the caller gives one
    (that folder's ``shopapp.toml`` is the one read), else ``instance_path``, else
    ``SHOPAPP_INSTANCE_PATH`` or ``./instance``.
    """
    env = os.environ if environ is None else environ
    given = (overrides or {}).get("INSTANCE_PATH")
    if given:
        inst = Path(given).resolve()
    elif instance_path is not None:
        inst = instance_path
    elif env.get("SHOPAPP_INSTANCE_PATH"):
        inst = Path(env["SHOPAPP_INSTANCE_PATH"]).resolve()
    else:
        inst = (Path.cwd() / "instance").resolve()
    cfg = defaults(inst)
    toml_file = inst / "shopapp.toml"
    if toml_file.is_file():
        try:
            with toml_file.open("rb") as fh:
                data = tomllib.load(fh)
        except tomllib.TOMLDecodeError as exc:
            raise ConfigError(f"{toml_file}: not valid TOML ({exc})") from None
        for key, value in data.items():
            name = key.upper()
            cfg[name] = str(value) if KEY_TYPES.get(name) is str else value
    for key, value in env.items():
        if key.startswith(ENV_PREFIX) and key != "SHOPAPP_INSTANCE_PATH":
            name = key[len(ENV_PREFIX):]
            cfg[name] = _typed(name, value, key)
    if overrides:
        cfg.update(overrides)
    cfg["INSTANCE_PATH"] = str(inst)
    return cfg


def check_config(cfg: Mapping[str, Any]) -> None:
    """Refuse to start production without a secret key, or with a negative proxy count."""
    hops = cfg.get("TRUSTED_PROXIES") or 0
    if not isinstance(hops, int) or hops < 0 or hops > 5:
        raise ConfigError(f"TRUSTED_PROXIES must be a whole number from 0 to 5, got {hops!r}")
    if not cfg.get("REQUIRE_SECRET_KEY", True):
        return
    if not cfg.get("SECRET_KEY") and not (cfg.get("DEBUG") or cfg.get("TESTING")):
        raise ConfigError(
            "SECRET_KEY is not set: set SHOPAPP_SECRET_KEY or secret_key in "
            "instance/shopapp.toml (scripts/serve writes one on first run)"
        )
