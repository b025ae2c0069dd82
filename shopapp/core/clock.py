"""Which day it is for the shop: the one home of "today" and of a moment's calendar day.

Moments are stored in UTC (``models.base.utcnow``). The days people type and read —
received, dispatched, performed on, "today" in the date window, the day a certificate says
the rotor was balanced — are the shop's days: the server's local time zone, or
``time_zone`` (an IANA name such as ``Europe/Vienna``) in ``instance/shopapp.toml`` /
``SHOPAPP_TIME_ZONE`` when the server's clock runs on another zone (containers often run
on UTC). Before, the date window used the UTC day and the forms the server's local one:
a shop east of Greenwich booking in the morning had its own default date refused as "in
the future", and a shop west of it saw tomorrow's date on jobs booked in the evening.

The shop measures' periods still put a stored moment into the period of its UTC date
(their SQL has no time zone table on SQLite); see the README's "Shop measures".
"""

from __future__ import annotations

import datetime as dt
import zoneinfo

from shopapp.core.config import ConfigError

_zone: zoneinfo.ZoneInfo | None = None  # None: the server's local time zone


def set_shop_zone(name: str | None) -> None:
    """Use the IANA time zone ``name`` for the shop's days; None or "" for the server's
    local zone. A name that is not a known zone stops the start with a message."""
    global _zone
    if not name:
        _zone = None
        return
    try:
        _zone = zoneinfo.ZoneInfo(str(name).strip())
    # OSError: a folder of zones ("Europe"), a name too long for a file name.
    except (zoneinfo.ZoneInfoNotFoundError, ValueError, OSError):
        raise ConfigError(
            f"TIME_ZONE: {str(name)[:60]!r} is not a known time zone; use an IANA name such "
            "as Europe/Vienna or America/Chicago, or leave it out for the server's own"
        ) from None


def shop_zone_name() -> str:
    """The zone the shop's days are counted in, as people read it."""
    if _zone is not None:
        return _zone.key
    return f"the server's local time ({dt.datetime.now().astimezone().tzname()})"


def _utc_now() -> dt.datetime:
    # Not models.utcnow: core.display reads this module, and the reports and charts that
    # use the display may not reach the models (docs/architecture.md, "Layers").
    return dt.datetime.now(dt.UTC)


def shop_now() -> dt.datetime:
    """Now, as an aware time in the shop's zone."""
    now = _utc_now()
    return now.astimezone(_zone) if _zone is not None else now.astimezone()


def shop_today() -> dt.date:
    """Today's date where the shop is."""
    return shop_now().date()


def shop_date(moment: dt.datetime) -> dt.date:
    """The shop's calendar day of the aware ``moment`` (a naive one is taken as UTC, as
    stored)."""
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=dt.UTC)
    return moment.astimezone(_zone).date() if _zone is not None else moment.astimezone().date()
