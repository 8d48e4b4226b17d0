"""The audit trail's record of the demo archive as a whole: when it was loaded and when it was removed."""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor, record_event
from tracedesk.models import AuditEvent

# One entity for the demo as a whole, so its history page reads as a log of loads and removals.
DEMO_ENTITY_TYPE = "demo_archive"
DEMO_ENTITY_ID = "demo"


def record_demo_event(
    session: Session, *, actor: Actor, action: str, changes: dict[str, Any], reason: str | None = None
) -> None:
    """Append a "load" or "remove" event about the demo archive."""
    record_event(
        session,
        actor=actor,
        action=action,
        entity_type=DEMO_ENTITY_TYPE,
        entity_id=DEMO_ENTITY_ID,
        changes=changes,
        reason=reason,
    )


def demo_was_removed(session: Session) -> bool:
    """Whether someone removed the demo before (then it is not loaded again unasked)."""
    query = (
        select(AuditEvent.seq).where(AuditEvent.entity_type == DEMO_ENTITY_TYPE, AuditEvent.action == "remove").limit(1)
    )
    return session.scalar(query) is not None
