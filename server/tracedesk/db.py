"""Engine and session factories. Built by ``create_app`` or the CLI from settings, never at import time."""

from __future__ import annotations

import sqlite3
import weakref
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any, TypeVar

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.exc import DBAPIError, OperationalError
from sqlalchemy.orm import Session, sessionmaker

from tracedesk.writer_gate import WriterGate

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


# Writer sessions of an embedded SQLite database queue on a FIFO lock of this process before BEGIN IMMEDIATE
# (``writer_gate.WriterGate``). Several processes still meet in SQLite's busy timeout.
_WRITER_GATES: weakref.WeakKeyDictionary[sessionmaker[Session], WriterGate] = weakref.WeakKeyDictionary()


def session_factory(engine: Engine, *, exclusive: bool = False) -> sessionmaker[Session]:
    """Sessions on ``engine``; ``exclusive`` ones (SQLite writers) run one at a time within this process."""
    factory = sessionmaker(bind=engine, expire_on_commit=False, autoflush=True)
    if exclusive:
        _WRITER_GATES[factory] = WriterGate()
    return factory


class DatabaseBusy(OperationalError):
    """The in-process writer queue did not free up within the busy timeout."""


def writer_gate(factory: sessionmaker[Session]) -> WriterGate | None:
    """The in-process writer lock of an exclusive factory, or None (PostgreSQL, readers)."""
    return _WRITER_GATES.get(factory)


def _busy() -> DatabaseBusy:
    return DatabaseBusy("BEGIN IMMEDIATE", None, Exception("database is locked (writer queue timed out)"))


async def acquire_without_a_thread(gate: WriterGate) -> None:
    """Wait for the writer lock in the event loop, so waiting requests do not hold worker threads.

    (Blocking worker threads on the lock can starve the pool that the lock holder needs to finish.)
    """
    if not await gate.acquire_async(SQLITE_BUSY_TIMEOUT_MS / 1000):
        raise _busy()


@contextmanager
def _gate(factory: sessionmaker[Session]) -> Iterator[None]:
    gate = _WRITER_GATES.get(factory)
    if gate is None:
        yield
        return
    if not gate.acquire(SQLITE_BUSY_TIMEOUT_MS / 1000):
        raise _busy()
    try:
        yield
    finally:
        gate.release()


@contextmanager
def transaction(factory: sessionmaker[Session]) -> Iterator[Session]:
    """One unit of work: commit on success, roll back on any error. The CLI and jobs use this."""
    with _gate(factory):
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
