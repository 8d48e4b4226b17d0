"""The admins' filtered view of the audit trail and its CSV export (one row per event, oldest first)."""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import asdict, dataclass
from datetime import UTC, date, datetime, time, timedelta
from typing import Any

from sqlalchemy import Select, func, select
from sqlalchemy.orm import Session

from tracedesk.exports.csv_cells import Cell
from tracedesk.models import AuditEvent

EXPORT_BATCH = 2000
AUDIT_HEADER = [
    "sequence",
    "occurred at (ISO 8601, UTC)",
    "actor id",
    "actor",
    "action",
    "entity type",
    "entity id",
    "entity version",
    "changes (JSON)",
    "reason",
    "previous hash",
    "hash",
]


@dataclass(frozen=True)
class AuditFilters:
    """What to show: every field is optional; dates are UTC calendar days, ``until`` inclusive."""

    entity_type: str | None = None
    entity_id: str | None = None
    actor_id: int | None = None
    action: str | None = None
    since: date | None = None
    until: date | None = None

    def as_dict(self) -> dict[str, Any]:
        return {name: (value.isoformat() if isinstance(value, date) else value) for name, value in asdict(self).items()}


def _stamp(day: date) -> str:
    """The stored text form of midnight UTC at the start of ``day`` (times are stored as fixed-width text)."""
    moment = datetime.combine(day, time(0, 0), tzinfo=UTC)
    return moment.isoformat(timespec="microseconds").replace("+00:00", "Z")


def filtered(filters: AuditFilters) -> Select[AuditEvent]:
    query = select(AuditEvent)
    if filters.entity_type:
        query = query.where(AuditEvent.entity_type == filters.entity_type)
    if filters.entity_id:
        query = query.where(AuditEvent.entity_id == filters.entity_id)
    if filters.actor_id is not None:
        query = query.where(AuditEvent.actor_id == filters.actor_id)
    if filters.action:
        query = query.where(AuditEvent.action == filters.action)
    if filters.since:
        query = query.where(AuditEvent.occurred_at >= _stamp(filters.since))
    if filters.until:
        query = query.where(AuditEvent.occurred_at < _stamp(filters.until + timedelta(days=1)))
    return query


def page_of_events(
    session: Session, filters: AuditFilters, *, before_seq: int | None, limit: int
) -> tuple[list[AuditEvent], int | None]:
    """Newest first, ``limit`` at a time (keyset on the sequence number); returns the next ``before_seq``."""
    query = filtered(filters)
    if before_seq is not None:
        query = query.where(AuditEvent.seq < before_seq)
    events = list(session.scalars(query.order_by(AuditEvent.seq.desc()).limit(limit + 1)))
    more = len(events) > limit
    events = events[:limit]
    return events, (events[-1].seq if more and events else None)


def count_matching(session: Session, filters: AuditFilters) -> int:
    return int(session.scalar(select(func.count()).select_from(filtered(filters).subquery())) or 0)


def distinct_values(session: Session) -> dict[str, list[str]]:
    """Entity types and actions present in the trail, for the filter form."""
    types = session.scalars(select(AuditEvent.entity_type).distinct().order_by(AuditEvent.entity_type))
    actions = session.scalars(select(AuditEvent.action).distinct().order_by(AuditEvent.action))
    return {"entity_types": list(types), "actions": list(actions)}


def audit_rows(session: Session, filters: AuditFilters) -> Iterator[list[Cell]]:
    """Matching events oldest first, read in batches so a long trail is never loaded at once."""
    last = 0
    while True:
        query = filtered(filters).where(AuditEvent.seq > last).order_by(AuditEvent.seq).limit(EXPORT_BATCH)
        batch = list(session.scalars(query))
        if not batch:
            return
        for event in batch:
            yield [
                event.seq,
                event.occurred_at,
                event.actor_id,
                event.actor_name,
                event.action,
                event.entity_type,
                event.entity_id,
                event.entity_version,
                event.changes,
                event.reason,
                event.prev_hash,
                event.hash,
            ]
        last = batch[-1].seq
        session.expunge_all()
