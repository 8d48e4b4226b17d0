"""Declarative base, naming convention and the UTC timestamp column type shared by every table."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from sqlalchemy import DateTime, MetaData, TypeDecorator
from sqlalchemy.engine import Dialect
from sqlalchemy.orm import DeclarativeBase, declared_attr

NAMING_CONVENTION = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}


def utcnow() -> datetime:
    """The current time, timezone-aware UTC, microseconds kept."""
    return datetime.now(UTC)


class UTCDateTime(TypeDecorator[datetime]):
    """A timestamp stored as UTC and always read back timezone-aware (SQLite keeps no offset)."""

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime given to a UTC column")
        return value.astimezone(UTC)

    def process_result_value(self, value: Any, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        moment: datetime = value
        if moment.tzinfo is None:
            return moment.replace(tzinfo=UTC)
        return moment.astimezone(UTC)


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING_CONVENTION)

    @declared_attr.directive
    def __mapper_args__(cls) -> dict[str, Any]:  # noqa: N805 - a declared_attr receives the class
        """Tables with a ``version`` column update only the version that was read (``WHERE version = ...``).

        The services still set the new version themselves; this makes a concurrent change fail the flush
        (StaleDataError, answered 412/409) instead of being silently overwritten: on PostgreSQL two requests can
        both pass their If-Match check before either commits (RELIABILITY.md, lost updates).
        """
        table = getattr(cls, "__table__", None)
        if table is not None and "version" in table.c:
            return {"version_id_col": table.c.version, "version_id_generator": False}
        return {}
