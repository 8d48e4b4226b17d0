"""Turning task rows into API bodies: names of the people involved, the sheet's file name, what the caller may do."""

from __future__ import annotations

from collections.abc import Iterable
from datetime import UTC, date, datetime

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.accounts.permissions import Permission, role_allows
from tracedesk.models import ReviewComment, Sheet, Task, User
from tracedesk.workflow.access import involves, may_review, may_take
from tracedesk.workflow.schemas import CommentRead, PersonRef, TaskRead
from tracedesk.workflow.states import ACTIVE_STATES, REASSIGNABLE_STATES, TRANSITIONS


def today_utc() -> date:
    return datetime.now(UTC).date()


def people_by_id(session: Session, ids: Iterable[int | None]) -> dict[int, User]:
    wanted = {i for i in ids if i is not None}
    if not wanted:
        return {}
    return {user.id: user for user in session.scalars(select(User).where(User.id.in_(wanted)))}


def person_ref(people: dict[int, User], user_id: int | None) -> PersonRef | None:
    if user_id is None:
        return None
    user = people.get(user_id)
    return PersonRef(id=user_id, display_name=user.display_name if user else f"user {user_id}")


def allowed_actions(task: Task, user: User) -> list[str]:
    """Actions the state machine and the caller's role allow now (four-eyes is checked when signing)."""
    actions = [
        action
        for action, transition in TRANSITIONS.items()
        if task.state in transition.sources and may_take(task, user, transition)
    ]
    if "submit" in actions and task.double_digitization:
        done = task.technician_submitted if user.id == task.technician_id else task.second_submitted
        if done:
            actions.remove("submit")
    if task.state == "submitted" and may_review(task, user):
        actions.append("sign_reviewed")
    if task.state in REASSIGNABLE_STATES and role_allows(user.role, Permission.MANAGE_TASKS):
        actions.append("reassign")
    if involves(task, user.id) or may_review(task, user):
        actions.append("comment")
    return actions


def is_overdue(task: Task, today: date) -> bool:
    return task.due_date is not None and task.due_date < today and task.state in ACTIVE_STATES


def task_reads(session: Session, tasks: list[Task], user: User) -> list[TaskRead]:
    people = people_by_id(session, [i for t in tasks for i in (t.technician_id, t.second_technician_id, t.reviewer_id)])
    sheet_ids = {task.sheet_id for task in tasks}
    names = (
        dict(session.execute(select(Sheet.id, Sheet.filename).where(Sheet.id.in_(sheet_ids))).all())
        if sheet_ids
        else {}
    )
    today = today_utc()
    return [
        TaskRead(
            id=task.id,
            sheet_id=task.sheet_id,
            collection_id=task.collection_id,
            sheet_filename=names.get(task.sheet_id, ""),
            state=task.state,
            technician=person_ref(people, task.technician_id),
            second_technician=person_ref(people, task.second_technician_id),
            reviewer=person_ref(people, task.reviewer_id),
            priority=task.priority,
            due_date=task.due_date,
            overdue=is_overdue(task, today),
            double_digitization=task.double_digitization,
            technician_submitted=task.technician_submitted,
            second_submitted=task.second_submitted,
            reason=task.reason,
            submitted_at=task.submitted_at,
            approved_at=task.approved_at,
            created_at=task.created_at,
            updated_at=task.updated_at,
            version=task.version,
            allowed_actions=allowed_actions(task, user),
        )
        for task in tasks
    ]


def task_read(session: Session, task: Task, user: User) -> TaskRead:
    return task_reads(session, [task], user)[0]


def comment_reads(session: Session, comments: list[ReviewComment]) -> list[CommentRead]:
    people = people_by_id(session, [i for c in comments for i in (c.author_id, c.resolved_by_id)])
    reads = []
    for comment in comments:
        author = person_ref(people, comment.author_id)
        assert author is not None
        reads.append(
            CommentRead(
                id=comment.id,
                task_id=comment.task_id,
                sheet_id=comment.sheet_id,
                author=author,
                body=comment.body,
                u=comment.u,
                v=comment.v,
                trace_id=comment.trace_id,
                created_at=comment.created_at,
                resolved_at=comment.resolved_at,
                resolved_by=person_ref(people, comment.resolved_by_id),
                version=comment.version,
            )
        )
    return reads
