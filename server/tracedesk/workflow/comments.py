"""Review comments: written by the task's reviewer or assignees, optionally pinned to a sheet position, resolved
when dealt with. Never commits."""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.audit.service import created_fields, record_event
from tracedesk.errors import Forbidden, NotFound, Unprocessable
from tracedesk.models import ReviewComment, Sheet, Task, Trace, User
from tracedesk.models.base import utcnow
from tracedesk.workflow.access import involves, may_review
from tracedesk.workflow.notices import notify
from tracedesk.workflow.schemas import CommentCreate
from tracedesk.workflow.tasks import actor_of


def may_comment(task: Task, user: User) -> bool:
    return involves(task, user.id) or may_review(task, user)


def _check_position(session: Session, task: Task, body: CommentCreate) -> None:
    sheet = session.get(Sheet, task.sheet_id)
    if sheet is None:
        raise NotFound(f"the sheet of task {task.id} is gone")
    if body.u is not None and body.v is not None and not (0 <= body.u <= sheet.width and 0 <= body.v <= sheet.height):
        raise Unprocessable(
            f"the pin ({body.u:g}, {body.v:g}) lies outside the sheet ({sheet.width} x {sheet.height} px)"
        )
    if body.trace_id is not None:
        trace = session.get(Trace, body.trace_id)
        if trace is None or trace.sheet_id != task.sheet_id:
            raise Unprocessable(f"trace {body.trace_id} is not on this task's sheet")


def add_comment(session: Session, task: Task, body: CommentCreate, *, user: User) -> ReviewComment:
    if not may_comment(task, user):
        raise Forbidden("only the task's reviewer and technicians can comment on it")
    _check_position(session, task, body)
    comment = ReviewComment(
        task_id=task.id,
        sheet_id=task.sheet_id,
        author_id=user.id,
        body=body.body.strip(),
        u=body.u,
        v=body.v,
        trace_id=body.trace_id,
    )
    session.add(comment)
    session.flush()
    actor = actor_of(user)
    values = {"task_id": task.id, "body": comment.body, "u": comment.u, "v": comment.v, "trace_id": comment.trace_id}
    record_event(
        session,
        actor=actor,
        action="create",
        entity_type="review_comment",
        entity_id=comment.id,
        entity_version=comment.version,
        changes=created_fields(values),
    )
    where = f" at ({comment.u:.0f}, {comment.v:.0f}) px" if comment.u is not None and comment.v is not None else ""
    message = f"{actor.name} commented on sheet {task.sheet_id}{where}: {comment.body[:200]}"
    recipients = [task.technician_id, task.second_technician_id, task.reviewer_id]
    notify(session, recipients, kind="comment", message=message, task_id=task.id, skip=user.id)
    return comment


def comments_of(session: Session, task_id: int) -> list[ReviewComment]:
    return list(
        session.scalars(select(ReviewComment).where(ReviewComment.task_id == task_id).order_by(ReviewComment.id))
    )


def get_comment(session: Session, comment_id: int) -> ReviewComment:
    comment = session.get(ReviewComment, comment_id)
    if comment is None:
        raise NotFound(f"no comment with id {comment_id}")
    return comment


def set_resolved(session: Session, task: Task, comment: ReviewComment, *, resolved: bool, user: User) -> ReviewComment:
    if not may_comment(task, user):
        raise Forbidden("only the task's reviewer and technicians can resolve its comments")
    if (comment.resolved_at is not None) == resolved:
        return comment
    comment.resolved_at = utcnow() if resolved else None
    comment.resolved_by_id = user.id if resolved else None
    comment.version += 1
    record_event(
        session,
        actor=actor_of(user),
        action="resolve" if resolved else "reopen",
        entity_type="review_comment",
        entity_id=comment.id,
        entity_version=comment.version,
        changes={"resolved": {"old": not resolved, "new": resolved}},
    )
    return comment
