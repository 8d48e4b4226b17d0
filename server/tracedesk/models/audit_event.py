"""The append-only, hash-chained audit trail (see RELIABILITY.md) and its chain head."""

from __future__ import annotations

from sqlalchemy import Index, Integer, String, Text
from sqlalchemy.orm import Mapped, mapped_column

from tracedesk.models.base import Base


class AuditEvent(Base):
    """One change. Time and changes are stored as text so the hashed bytes survive any database round trip."""

    __tablename__ = "audit_events"
    __table_args__ = (Index("ix_audit_events_entity", "entity_type", "entity_id"),)

    seq: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=False)
    occurred_at: Mapped[str] = mapped_column(String(40))
    actor_id: Mapped[int | None] = mapped_column(Integer, nullable=True)
    actor_name: Mapped[str] = mapped_column(String(200))
    action: Mapped[str] = mapped_column(String(60))
    entity_type: Mapped[str] = mapped_column(String(40))
    entity_id: Mapped[str] = mapped_column(String(64))
    entity_version: Mapped[int | None] = mapped_column(Integer, nullable=True)
    changes: Mapped[str] = mapped_column(Text)
    reason: Mapped[str | None] = mapped_column(Text, nullable=True)
    prev_hash: Mapped[str] = mapped_column(String(64))
    hash: Mapped[str] = mapped_column(String(64))


class AuditChainHead(Base):
    """A single row holding the last sequence number and hash; locking it serialises appends."""

    __tablename__ = "audit_chain_head"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=False)
    last_seq: Mapped[int] = mapped_column(Integer)
    last_hash: Mapped[str] = mapped_column(String(64))
