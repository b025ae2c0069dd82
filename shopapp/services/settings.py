"""The shop's settings row (created with defaults on first write, never on a GET)."""

from __future__ import annotations

from sqlalchemy.orm import Session

from shopapp.models import ShopSettings


def get_settings(session: Session) -> ShopSettings:
    """The settings; an unsaved default row when none was stored yet (no write on read)."""
    row = session.get(ShopSettings, 1)
    if row is not None:
        return row
    defaults = ShopSettings(id=1)
    # Column defaults only apply at INSERT; fill them in for the unsaved object.
    for col in ShopSettings.__table__.columns:
        if getattr(defaults, col.key) is None and col.default is not None and col.default.is_scalar:
            setattr(defaults, col.key, col.default.arg)
    return defaults


def settings_for_update(session: Session) -> ShopSettings:
    """The stored settings row, inserted with defaults if missing (for writers)."""
    row = session.get(ShopSettings, 1)
    if row is None:
        row = get_settings(session)
        session.add(row)
        session.flush()
    return row
