"""Moving an embedded SQLite archive into PostgreSQL, keeping ids, the audit chain and the files.

The target is migrated to the newest schema, then every table is copied in dependency order inside one
transaction (ids included), sequences are set past the copied ids, and the chain head is carried over. The files
stay where they are (same data folder or object store); the move then checks row counts and the audit chain.
"""

from __future__ import annotations

from collections.abc import Callable

from sqlalchemy import Connection, Engine, func, select, text, update
from sqlalchemy.orm import Session

from tracedesk.audit.service import verify_chain
from tracedesk.maintenance.backup import BackupError
from tracedesk.maintenance.inventory import row_counts
from tracedesk.migrate import upgrade_database
from tracedesk.models import AuditChainHead, Base

BATCH = 2000
Progress = Callable[[str], None]


def _target_is_empty(target: Engine) -> bool:
    counts = row_counts(target)
    counts.pop(AuditChainHead.__tablename__, None)
    return not any(counts.values())


def _copy_tables(source: Engine, target: Engine, say: Progress) -> None:
    with source.connect() as reader, target.begin() as writer:
        for table in Base.metadata.sorted_tables:
            if table.name == AuditChainHead.__tablename__:
                continue
            say(f"copying {table.name}")
            result = reader.execution_options(stream_results=True).execute(select(table))
            while rows := result.fetchmany(BATCH):
                writer.execute(table.insert(), [dict(row._mapping) for row in rows])
        head = reader.execute(select(AuditChainHead.last_seq, AuditChainHead.last_hash)).one()
        writer.execute(update(AuditChainHead).where(AuditChainHead.id == 1).values(last_seq=head[0], last_hash=head[1]))
        _advance_sequences(writer)


def _advance_sequences(writer: Connection) -> None:
    """Point each serial id sequence past the copied ids, so new rows do not collide with moved ones."""
    for table in Base.metadata.sorted_tables:
        column = table.columns.get("id")
        if column is None or not column.autoincrement:
            continue
        writer.execute(
            text(
                f"SELECT setval(pg_get_serial_sequence('{table.name}', 'id'), "  # noqa: S608 - names from metadata
                f"COALESCE((SELECT MAX(id) FROM {table.name}), 0) + 1, false)"
            )
        )


def move_to_postgres(source: Engine, target: Engine, *, progress: Progress | None = None) -> dict[str, int]:
    """Copy the SQLite archive ``source`` into the PostgreSQL database ``target``; returns the row counts."""
    say = progress or (lambda _message: None)
    if source.dialect.name != "sqlite" or target.dialect.name != "postgresql":
        raise BackupError("the move goes from the embedded SQLite database to PostgreSQL")
    say("migrating the target database")
    upgrade_database(target)
    if not _target_is_empty(target):
        raise BackupError("the target PostgreSQL database already holds data; use a new, empty database")
    with Session(source) as session:
        if not verify_chain(session).ok:
            raise BackupError("the source audit chain does not verify; run `tracedesk audit verify` first")
    _copy_tables(source, target, say)
    expected, actual = row_counts(source), row_counts(target)
    if expected != actual:
        raise BackupError(f"row counts differ after the move: {expected} != {actual}")
    with Session(target) as session:
        report = verify_chain(session)
        if not report.ok:
            raise BackupError(f"the moved audit chain breaks at {report.first_broken_seq}: {report.problem}")
        count = session.scalar(select(func.count()).select_from(AuditChainHead))
        assert count == 1
    return actual
