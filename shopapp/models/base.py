"""Declarative base, naming convention and shared column types."""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Any

from sqlalchemy import CheckConstraint, DateTime, Integer, MetaData, String, TypeDecorator
from sqlalchemy.orm import DeclarativeBase, mapped_column

NAMING_CONVENTION = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_N_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}


def utcnow() -> dt.datetime:
    """Timezone-aware UTC now; used as a *callable* column default."""
    return dt.datetime.now(dt.UTC)


class UTCDateTime(TypeDecorator[dt.datetime]):
    """Stores UTC; always returns aware datetimes (SQLite drops tzinfo otherwise)."""

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: dt.datetime | None, dialect: Any) -> dt.datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime given; shopapp stores UTC-aware datetimes only")
        value = value.astimezone(dt.UTC)
        return value.replace(tzinfo=None) if dialect.name == "sqlite" else value

    def process_result_value(self, value: dt.datetime | None, dialect: Any) -> dt.datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            return value.replace(tzinfo=dt.UTC)
        return value.astimezone(dt.UTC)


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING_CONVENTION)


# Repeated column shapes.
IntPK = Annotated[int, mapped_column(Integer, primary_key=True)]
Timestamp = Annotated[dt.datetime, mapped_column(UTCDateTime(), default=utcnow, nullable=False)]
Name = Annotated[str, mapped_column(String(200), nullable=False)]
ShortText = Annotated[str, mapped_column(String(64), nullable=False)]


def one_of(column: str, values: tuple[str, ...], name: str | None = None) -> CheckConstraint:
    """CHECK that ``column`` holds one of ``values``."""
    listed = ", ".join(f"'{v}'" for v in values)
    return CheckConstraint(f"{column} IN ({listed})", name=name or f"{column}_allowed")


def positive(column: str, *, nullable: bool = True) -> CheckConstraint:
    """CHECK ``column > 0`` (NULL allowed when the column is nullable)."""
    expr = f"{column} > 0" if not nullable else f"{column} IS NULL OR {column} > 0"
    return CheckConstraint(expr, name=f"{column}_positive")


def angle_range(column: str) -> CheckConstraint:
    """CHECK ``0 <= column < 360`` (degrees, normalised by the services)."""
    return CheckConstraint(
        f"{column} IS NULL OR ({column} >= 0 AND {column} < 360)", name=f"{column}_range"
    )
