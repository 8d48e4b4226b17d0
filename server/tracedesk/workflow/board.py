"""The collection board (counts per state, progress, overdue tasks, per-person load) and each person's queue."""

from __future__ import annotations

from sqlalchemy import Select, case, func, or_, select
from sqlalchemy.orm import Session

from tracedesk.accounts.permissions import Permission, role_allows
from tracedesk.archive.service import count_sheets, get_collection
from tracedesk.models import Task, User
from tracedesk.models.task import TASK_PRIORITIES, TASK_STATES
from tracedesk.workflow.notices import unread_count
from tracedesk.workflow.schemas import BoardRead, PersonLoad, WorkQueueRead
from tracedesk.workflow.views import people_by_id, person_ref, task_reads, today_utc

TO_DIGITIZE = ("open", "in_progress", "returned")
MAX_QUEUE = 500
# Most urgent first; the stored value is a word, so rank it in SQL.
PRIORITY_RANK = case({name: rank for rank, name in enumerate(reversed(TASK_PRIORITIES))}, value=Task.priority)


def _ordered(query: Select[Task]) -> Select[Task]:
    return query.order_by(PRIORITY_RANK, Task.due_date.is_(None), Task.due_date, Task.id).limit(MAX_QUEUE)


def my_work(session: Session, user: User) -> WorkQueueRead:
    """Tasks waiting for ``user``: sheets to digitize (assigned to them) and sheets to review (assigned to them,
    or with no reviewer assigned when they may review)."""
    mine = or_(Task.technician_id == user.id, Task.second_technician_id == user.id)
    digitize = list(session.scalars(_ordered(select(Task).where(mine, Task.state.in_(TO_DIGITIZE)))))
    digitize = [
        task
        for task in digitize
        if not (task.double_digitization and _part_done(task, user.id) and task.state == "in_progress")
    ]
    review: list[Task] = []
    if role_allows(user.role, Permission.REVIEW):
        query = select(Task).where(Task.state == "submitted")
        if not role_allows(user.role, Permission.MANAGE_USERS):  # admins may review any task
            query = query.where(or_(Task.reviewer_id == user.id, Task.reviewer_id.is_(None)))
        review = [task for task in session.scalars(_ordered(query)) if user.id not in _assignees(task)]
    return WorkQueueRead(
        to_digitize=task_reads(session, digitize, user),
        to_review=task_reads(session, review, user),
        unread_notices=unread_count(session, user.id),
    )


def _assignees(task: Task) -> tuple[int | None, int | None]:
    return task.technician_id, task.second_technician_id


def _part_done(task: Task, user_id: int) -> bool:
    return task.technician_submitted if user_id == task.technician_id else task.second_submitted


def _load(session: Session, collection_id: int) -> list[PersonLoad]:
    digitize: dict[int, int] = {}
    for column in (Task.technician_id, Task.second_technician_id):
        rows = session.execute(
            select(column, func.count())
            .where(Task.collection_id == collection_id, column.is_not(None), Task.state.in_(TO_DIGITIZE))
            .group_by(column)
        ).all()
        for user_id, count in rows:
            if user_id is not None:
                digitize[user_id] = digitize.get(user_id, 0) + int(count)
    review_rows = session.execute(
        select(Task.reviewer_id, func.count())
        .where(Task.collection_id == collection_id, Task.reviewer_id.is_not(None), Task.state == "submitted")
        .group_by(Task.reviewer_id)
    ).all()
    review = {user_id: int(count) for user_id, count in review_rows if user_id is not None}
    people = people_by_id(session, set(digitize) | set(review))
    loads = []
    for user_id in sorted(set(digitize) | set(review), key=lambda i: people[i].display_name if i in people else ""):
        ref = person_ref(people, user_id)
        assert ref is not None
        loads.append(PersonLoad(person=ref, to_digitize=digitize.get(user_id, 0), to_review=review.get(user_id, 0)))
    return loads


def collection_board(session: Session, collection_id: int, user: User) -> BoardRead:
    get_collection(session, collection_id)
    rows = session.execute(
        select(Task.state, func.count()).where(Task.collection_id == collection_id).group_by(Task.state)
    ).all()
    counts = {state: 0 for state in TASK_STATES} | {str(state): int(count) for state, count in rows}
    with_task = sum(counts.values())
    live = with_task - counts["withdrawn"]
    overdue_query = select(Task).where(
        Task.collection_id == collection_id,
        Task.due_date < today_utc(),
        Task.state.in_(("open", "in_progress", "returned", "submitted")),
    )
    overdue = list(session.scalars(_ordered(overdue_query)))
    total = count_sheets(session, collection_id)
    return BoardRead(
        collection_id=collection_id,
        total_sheets=total,
        without_task=max(total - with_task, 0),
        counts=counts,
        approved_fraction=counts["approved"] / live if live else 0.0,
        overdue=task_reads(session, overdue, user),
        load=_load(session, collection_id),
    )
