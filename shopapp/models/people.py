"""Users and the shop's own settings."""

from __future__ import annotations

import datetime as dt

from sqlalchemy import Boolean, CheckConstraint, Float, Integer, String, Text, false
from sqlalchemy.orm import Mapped, mapped_column

from shopapp.models.base import Base, IntPK, Timestamp, UTCDateTime, one_of

ROLES = ("operator", "quality", "owner", "admin")
ANGLE_SENSES = ("with_rotation", "against_rotation")
UNBALANCE_DISPLAY_UNITS = ("g·mm", "g·in", "oz·in")


class User(Base):
    __tablename__ = "user_account"
    __table_args__ = (one_of("role", ROLES),)

    id: Mapped[IntPK]
    username: Mapped[str] = mapped_column(String(64), unique=True, nullable=False)
    full_name: Mapped[str] = mapped_column(String(200), nullable=False)
    role: Mapped[str] = mapped_column(String(16), nullable=False, index=True)
    password_hash: Mapped[str] = mapped_column(String(255), nullable=False)
    active: Mapped[bool] = mapped_column(Boolean, nullable=False, default=True)
    created_at: Mapped[Timestamp]
    last_login_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime())
    # Stored in each log-in session and compared on every request: raising it (log-out,
    # a password change or reset) ends every session the user has open anywhere.
    session_version: Mapped[int] = mapped_column(
        Integer, nullable=False, default=0, server_default="0"
    )
    # Set when an administrator gave the password (a new account, a reset on the users
    # page): every page asks for an own one first (shopapp.web.guards). The user's own
    # change clears it.
    must_change_password: Mapped[bool] = mapped_column(
        Boolean, nullable=False, default=False, server_default=false()
    )

    # Flask-Login protocol, kept here so the web layer needs no wrapper class.
    @property
    def is_active(self) -> bool:
        return self.active

    @property
    def is_authenticated(self) -> bool:
        return True

    @property
    def is_anonymous(self) -> bool:
        return False

    def get_id(self) -> str:
        return str(self.id)

    def __repr__(self) -> str:
        return f"<User {self.username} ({self.role})>"


class ShopSettings(Base):
    """The one row of shop-wide settings (id is always 1)."""

    __tablename__ = "shop_settings"
    __table_args__ = (
        CheckConstraint("id = 1", name="single_row"),
        one_of("angle_sense", ANGLE_SENSES),
        one_of("unbalance_unit", UNBALANCE_DISPLAY_UNITS),
        CheckConstraint("angle_zero_deg >= 0 AND angle_zero_deg < 360", name="angle_zero_range"),
        CheckConstraint("due_soon_days >= 0", name="due_soon_days_non_negative"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, default=1)
    shop_name: Mapped[str] = mapped_column(String(200), nullable=False, default="Balancing shop")
    shop_address: Mapped[str] = mapped_column(Text, nullable=False, default="")
    angle_sense: Mapped[str] = mapped_column(String(20), nullable=False, default="with_rotation")
    angle_zero_deg: Mapped[float] = mapped_column(Float, nullable=False, default=0.0)
    unbalance_unit: Mapped[str] = mapped_column(String(8), nullable=False, default="g·mm")
    job_number_pattern: Mapped[str] = mapped_column(
        String(64), nullable=False, default="J{year}-{seq:05d}"
    )
    due_soon_days: Mapped[int] = mapped_column(Integer, nullable=False, default=14)
    updated_at: Mapped[Timestamp]


THROTTLE_KINDS = ("account", "client")


class LoginThrottle(Base):
    """Failed log-ins counted per username tried (``account``) and per client address
    (``client``), kept in the database so every server process sees the same counts.

    ``locked_until``: log-ins for this username, or from this client, are refused
    until then (shopapp.accounts.logins decides the numbers).
    """

    __tablename__ = "login_throttle"
    __table_args__ = (one_of("kind", THROTTLE_KINDS),)

    kind: Mapped[str] = mapped_column(String(8), primary_key=True)
    # The username as typed (lower-cased, at most 64 characters) or the client address.
    subject: Mapped[str] = mapped_column(String(100), primary_key=True)
    failures: Mapped[int] = mapped_column(Integer, nullable=False)
    last_failure_at: Mapped[dt.datetime] = mapped_column(UTCDateTime(), nullable=False)
    locked_until: Mapped[dt.datetime | None] = mapped_column(UTCDateTime(), index=True)
