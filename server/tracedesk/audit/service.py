"""Recording audit events (always inside the caller's transaction) and verifying the chain."""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from datetime import date, datetime
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from tracedesk.audit.chain import GENESIS_HASH, canonical_json, event_hash
from tracedesk.models import AuditChainHead, AuditEvent
from tracedesk.models.base import utcnow

VERIFY_BATCH = 2000


@dataclass(frozen=True)
class Actor:
    """Who did it: a user (id and printed name) or the system itself (id None)."""

    id: int | None
    name: str


SYSTEM = Actor(id=None, name="system")


def _plain(value: Any) -> Any:
    if isinstance(value, datetime | date):
        return value.isoformat()
    return value


def field_changes(before: Mapping[str, Any], after: Mapping[str, Any]) -> dict[str, dict[str, Any]]:
    """Changed fields as {"field": {"old": ..., "new": ...}}; unchanged fields are left out."""
    names = sorted(set(before) | set(after))
    return {
        name: {"old": _plain(before.get(name)), "new": _plain(after.get(name))}
        for name in names
        if _plain(before.get(name)) != _plain(after.get(name))
    }


def created_fields(values: Mapping[str, Any]) -> dict[str, dict[str, Any]]:
    return field_changes({}, values)


def record_event(
    session: Session,
    *,
    actor: Actor,
    action: str,
    entity_type: str,
    entity_id: object,
    entity_version: int | None = None,
    changes: Mapping[str, Any] | None = None,
    reason: str | None = None,
) -> AuditEvent:
    """Append one event to the chain in the session's transaction.

    The chain head row is locked (``FOR UPDATE`` on PostgreSQL; SQLite writers already hold the database write
    lock) so sequence numbers stay gapless and the chain linear under concurrent writers.
    """
    head = session.execute(select(AuditChainHead).where(AuditChainHead.id == 1).with_for_update()).scalar_one()
    fields: dict[str, Any] = {
        "seq": head.last_seq + 1,
        "occurred_at": utcnow().isoformat(timespec="microseconds").replace("+00:00", "Z"),
        "actor_id": actor.id,
        "actor_name": actor.name,
        "action": action,
        "entity_type": entity_type,
        "entity_id": str(entity_id),
        "entity_version": entity_version,
        "changes": canonical_json(dict(changes or {})),
        "reason": reason,
    }
    digest = event_hash(head.last_hash, fields)
    event = AuditEvent(**fields, prev_hash=head.last_hash, hash=digest)
    session.add(event)
    head.last_seq = fields["seq"]
    head.last_hash = digest
    session.flush()
    return event


@dataclass(frozen=True)
class ChainReport:
    """The outcome of a chain check: how many events were read and the first broken sequence number."""

    ok: bool
    events_checked: int
    first_broken_seq: int | None
    problem: str | None


def _check_event(event: AuditEvent, expected_seq: int, prev_hash: str) -> str | None:
    if event.seq != expected_seq:
        return f"sequence gap: expected {expected_seq}, found {event.seq}"
    if event.prev_hash != prev_hash:
        return "previous-hash link does not match the event before it"
    fields = {name: getattr(event, name) for name in ("seq", "occurred_at", "actor_id", "actor_name", "action")}
    fields |= {
        "entity_type": event.entity_type,
        "entity_id": event.entity_id,
        "entity_version": event.entity_version,
        "changes": event.changes,
        "reason": event.reason,
    }
    if event_hash(prev_hash, fields) != event.hash:
        return "content does not match its hash"
    return None


def _events_in_order(session: Session) -> Iterable[AuditEvent]:
    last = 0
    while True:
        batch = session.scalars(
            select(AuditEvent).where(AuditEvent.seq > last).order_by(AuditEvent.seq).limit(VERIFY_BATCH)
        ).all()
        if not batch:
            return
        yield from batch
        last = batch[-1].seq
        session.expunge_all()


def verify_chain(session: Session) -> ChainReport:
    """Recompute the whole chain; name the first sequence number where it breaks (edit, deletion, swap)."""
    prev_hash, expected, checked = GENESIS_HASH, 1, 0
    for event in _events_in_order(session):
        problem = _check_event(event, expected, prev_hash)
        if problem is not None:
            return ChainReport(False, checked, expected, problem)
        prev_hash, expected, checked = event.hash, expected + 1, checked + 1
    head = session.get(AuditChainHead, 1)
    if head is None or head.last_seq != checked or head.last_hash != prev_hash:
        problem = "events missing at the end of the chain (its head does not match)"
        return ChainReport(False, checked, checked + 1, problem)
    return ChainReport(True, checked, None, None)


def count_events(session: Session) -> int:
    return int(session.scalar(select(func.count()).select_from(AuditEvent)) or 0)


def entity_history(session: Session, entity_type: str, entity_id: object) -> list[AuditEvent]:
    """Every event about one record, oldest first."""
    return list(
        session.scalars(
            select(AuditEvent)
            .where(AuditEvent.entity_type == entity_type, AuditEvent.entity_id == str(entity_id))
            .order_by(AuditEvent.seq)
        )
    )
