"""Approval state of sheets for the exports: the task's state and whether its approval signature still holds."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.models import Task
from tracedesk.workflow.signatures import approval_status, task_signature_statuses


@dataclass(frozen=True)
class SheetApproval:
    """``state``: "approved" (a signature that still holds), "approval void", a task state, or "no task"."""

    state: str
    task_id: int | None
    signed_by: str | None
    signed_at: datetime | None
    record_sha256: str | None
    void_reason: str | None


NO_TASK = SheetApproval("no task", None, None, None, None, None)


def approval_of_task(session: Session, task: Task) -> SheetApproval:
    if task.state != "approved":  # reopened tasks had their signatures withdrawn
        return SheetApproval(task.state, task.id, None, None, None, None)
    status = approval_status(task_signature_statuses(session, task))
    if status is None:
        return SheetApproval(task.state, task.id, None, None, None, None)
    signature = status.signature
    state = "approved" if status.valid else "approval void"
    return SheetApproval(
        state, task.id, signature.printed_name, signature.signed_at, signature.record_sha256, status.void_reason
    )


def approvals_of_sheets(session: Session, sheet_ids: list[int]) -> dict[int, SheetApproval]:
    tasks = list(session.scalars(select(Task).where(Task.sheet_id.in_(sheet_ids)))) if sheet_ids else []
    found = {task.sheet_id: approval_of_task(session, task) for task in tasks}
    return {sheet_id: found.get(sheet_id, NO_TASK) for sheet_id in sheet_ids}
