"""Who authored a sheet's digitization (the four-eyes rule: an author can never approve it).

An author is anyone who created or changed the sheet's calibration, traces or fits, as the audit trail and the
rows' own ``created_by``/``updated_by`` columns say. One kind of change is not authorship: a reviewer's decision,
in double digitization, to keep one technician's traces withdraws the other's (see ``double.py``); those
withdrawals carry ``KEEP_DECISION_PREFIX`` in their reason.
"""

from __future__ import annotations

from sqlalchemy import and_, not_, select
from sqlalchemy.orm import Session

from tracedesk.models import AuditEvent, Calibration, Fit, Trace
from tracedesk.workflow.record_events import record_entity_condition

KEEP_DECISION_PREFIX = "double digitization: reviewer kept "


def _row_authors(session: Session, sheet_id: int) -> set[int]:
    ids: set[int | None] = set(session.scalars(select(Trace.created_by_id).where(Trace.sheet_id == sheet_id)))
    ids |= set(
        session.scalars(
            select(Fit.created_by_id).join(Trace, Trace.id == Fit.trace_id).where(Trace.sheet_id == sheet_id)
        )
    )
    ids |= set(session.scalars(select(Calibration.updated_by_id).where(Calibration.sheet_id == sheet_id)))
    return {i for i in ids if i is not None}


def digitization_authors(session: Session, sheet_id: int) -> dict[int, str]:
    """User ids of the sheet's digitization authors, with the name the audit trail knows them by."""
    keep_decision = and_(AuditEvent.action == "withdraw", AuditEvent.reason.like(KEEP_DECISION_PREFIX + "%"))
    rows = session.execute(
        select(AuditEvent.actor_id, AuditEvent.actor_name)
        .where(record_entity_condition(session, sheet_id), AuditEvent.actor_id.is_not(None), not_(keep_decision))
        .distinct()
    ).all()
    authors = {int(actor_id): str(name) for actor_id, name in rows if actor_id is not None}
    for user_id in _row_authors(session, sheet_id):
        authors.setdefault(user_id, f"user {user_id}")
    return authors
