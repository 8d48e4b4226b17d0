"""What an archive holds, counted the same way before a backup, after a restore and after a move."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sqlalchemy import Engine, func, select
from sqlalchemy.orm import Session

from tracedesk.audit.service import verify_chain
from tracedesk.models import AuditChainHead, Base, Sheet, SourceFile
from tracedesk.storage import FileStore


@dataclass(frozen=True)
class Inventory:
    row_counts: dict[str, int]
    originals: dict[str, int]
    derived: list[str]
    audit_last_seq: int
    audit_last_hash: str
    chain_ok: bool

    def to_dict(self) -> dict[str, Any]:
        return {
            "row_counts": self.row_counts,
            "originals": self.originals,
            "derived": self.derived,
            "audit": {"last_seq": self.audit_last_seq, "last_hash": self.audit_last_hash, "chain_ok": self.chain_ok},
        }


def row_counts(engine: Engine) -> dict[str, int]:
    with engine.connect() as connection:
        return {
            table.name: int(connection.scalar(select(func.count()).select_from(table)) or 0)
            for table in Base.metadata.sorted_tables
        }


def take_inventory(session: Session, store: FileStore) -> Inventory:
    """Row counts of every table, the referenced originals (key -> size) and derived folders, the chain state."""
    bind = session.get_bind()
    assert isinstance(bind, Engine) or hasattr(bind, "engine")
    counts = row_counts(bind if isinstance(bind, Engine) else bind.engine)
    originals = {key: int(size) for key, size in session.execute(select(SourceFile.sha256, SourceFile.size_bytes))}
    derived = sorted(session.scalars(select(Sheet.derived_key)))
    head = session.get(AuditChainHead, 1)
    report = verify_chain(session)
    return Inventory(
        counts, originals, derived, head.last_seq if head else 0, head.last_hash if head else "", report.ok
    )
