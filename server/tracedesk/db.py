"""Engine and session factories. Built by ``create_app`` or the CLI from settings, never at import time."""

from __future__ import annotations

import sqlite3
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any, TypeVar

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.exc import DBAPIError, OperationalError
from sqlalchemy.orm import Session, sessionmaker

T = TypeVar("T")

# How long a SQLite writer waits for the lock before giving up (ms). Writers are short, so a few seconds is ample.
SQLITE_BUSY_TIMEOUT_MS = 15_000
SERIALIZATION_RETRIES = 5


def is_sqlite(engine: Engine) -> bool:
    return engine.dialect.name == "sqlite"


def build_engine(url: str, *, pool_size: int = 10, max_overflow: int = 10) -> Engine:
    """Create the engine with the durability settings of RELIABILITY.md.

    SQLite: WAL, foreign keys on, busy timeout and synchronous=FULL on every connection, and transactions that
    write start with ``BEGIN IMMEDIATE`` so that two writers never hit a stale-snapshot upgrade failure.
    PostgreSQL: a pooled engine with pre-ping; callers retry serialization failures (``run_with_retries``).
    """
    if url.startswith("sqlite"):
        engine = create_engine(url, connect_args={"check_same_thread": False, "timeout": 15})
        _install_sqlite_hooks(engine)
        return engine
    return create_engine(url, pool_size=pool_size, max_overflow=max_overflow, pool_pre_ping=True)


def _install_sqlite_hooks(engine: Engine) -> None:
    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_connection: sqlite3.Connection, _record: Any) -> None:
        # Take over transaction control from the sqlite3 module so BEGIN IMMEDIATE can be issued below.
        dbapi_connection.isolation_level = None
        cursor = dbapi_connection.cursor()
        cursor.execute("PRAGMA journal_mode=WAL")
        cursor.execute("PRAGMA foreign_keys=ON")
        cursor.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
        cursor.execute("PRAGMA synchronous=FULL")
        cursor.close()

    @event.listens_for(engine, "begin")
    def _on_begin(connection: Any) -> None:
        mode = connection.get_execution_options().get("sqlite_begin", "DEFERRED")
        connection.exec_driver_sql(f"BEGIN {mode}")


def writer_engine(engine: Engine) -> Engine:
    """The same pool, but SQLite transactions begin IMMEDIATE (take the write lock up front)."""
    if is_sqlite(engine):
        return engine.execution_options(sqlite_begin="IMMEDIATE")
    return engine


def session_factory(engine: Engine) -> sessionmaker[Session]:
    return sessionmaker(bind=engine, expire_on_commit=False, autoflush=True)


@contextmanager
def transaction(factory: sessionmaker[Session]) -> Iterator[Session]:
    """One unit of work: commit on success, roll back on any error. The CLI and jobs use this."""
    session = factory()
    try:
        yield session
        session.commit()
    except BaseException:
        session.rollback()
        raise
    finally:
        session.close()


def is_retryable(error: BaseException) -> bool:
    """True for PostgreSQL serialization failures / deadlocks and SQLite lock time-outs."""
    if isinstance(error, DBAPIError) and error.orig is not None:
        sqlstate = getattr(error.orig, "sqlstate", None)
        if sqlstate in {"40001", "40P01"}:
            return True
        if isinstance(error, OperationalError) and "database is locked" in str(error.orig):
            return True
    return False


def run_with_retries(work: Callable[[], T], *, attempts: int = SERIALIZATION_RETRIES) -> T:
    """Run a whole transaction again when the database asks for it (serialization failure)."""
    for attempt in range(attempts):
        try:
            return work()
        except DBAPIError as error:
            if attempt + 1 == attempts or not is_retryable(error):
                raise
    raise AssertionError("unreachable")
