"""What changed in a sheet's record around its submissions, read from the audit trail."""

from __future__ import annotations

from dataclasses import dataclass

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.models import AuditEvent, Task
from tracedesk.workflow.record_events import record_events


@dataclass(frozen=True)
class SubmissionChanges:
    """``in_rework``: changes between the previous submission and the latest one (what was fixed after a
    return); ``after_submission``: changes since the latest submission (normally none)."""

    submitted_seq: int | None
    previous_submitted_seq: int | None
    in_rework: list[AuditEvent]
    after_submission: list[AuditEvent]


def submission_seqs(session: Session, task: Task) -> list[int]:
    query = select(AuditEvent.seq).where(
        AuditEvent.entity_type == "task", AuditEvent.entity_id == str(task.id), AuditEvent.action == "submit"
    )
    return list(session.scalars(query.order_by(AuditEvent.seq)))


def changes_around_submission(session: Session, task: Task) -> SubmissionChanges:
    seqs = submission_seqs(session, task)
    if not seqs:
        return SubmissionChanges(None, None, [], [])
    latest = seqs[-1]
    previous = seqs[-2] if len(seqs) > 1 else None
    in_rework = record_events(session, task.sheet_id, after_seq=previous, up_to_seq=latest) if previous else []
    after = record_events(session, task.sheet_id, after_seq=latest)
    return SubmissionChanges(latest, previous, in_rework, after)
