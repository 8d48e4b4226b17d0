"""Who may see and act on a task: object-level checks that go with the role matrix in ``permissions.py``.

Reviewers and admins see every task; everyone else sees only tasks they are assigned to (404 for the rest, so
ids of other people's work reveal nothing).
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import or_, select
from sqlalchemy.orm import Session

from tracedesk.accounts.permissions import Permission, role_allows
from tracedesk.errors import Forbidden, NotFound
from tracedesk.models import Task, User
from tracedesk.workflow.states import Transition


def sees_all_tasks(user: User) -> bool:
    return role_allows(user.role, Permission.MANAGE_TASKS) or role_allows(user.role, Permission.REVIEW)


def is_assignee(task: Task, user_id: int) -> bool:
    return user_id in (task.technician_id, task.second_technician_id)


def involves(task: Task, user_id: int) -> bool:
    return is_assignee(task, user_id) or task.reviewer_id == user_id


def visibility_condition(user: User) -> Any:
    """A WHERE condition on ``Task`` limiting a query to what ``user`` may see (None: everything)."""
    if sees_all_tasks(user):
        return None
    return or_(Task.technician_id == user.id, Task.second_technician_id == user.id, Task.reviewer_id == user.id)


def find_task(session: Session, task_id: int, user: User, *, lock: bool = False) -> Task:
    """The task, if ``user`` may see it (else 404). ``lock`` takes the row lock that serialises transitions."""
    query = select(Task).where(Task.id == task_id)
    if lock:
        query = query.with_for_update().execution_options(populate_existing=True)
    task = session.scalar(query)
    if task is None or not (sees_all_tasks(user) or involves(task, user.id)):
        raise NotFound(f"no task with id {task_id}")
    return task


def may_review(task: Task, user: User) -> bool:
    """Reviewers may review unassigned-reviewer tasks and their own; admins (who manage users) any."""
    if not role_allows(user.role, Permission.REVIEW):
        return False
    return task.reviewer_id in (None, user.id) or role_allows(user.role, Permission.MANAGE_USERS)


def may_take(task: Task, user: User, transition: Transition) -> bool:
    if transition.who == "assignee":
        return is_assignee(task, user.id) and role_allows(user.role, Permission.DIGITIZE)
    if transition.who == "reviewer":
        return may_review(task, user)
    return role_allows(user.role, Permission.MANAGE_TASKS)


def require_may_take(task: Task, user: User, transition: Transition) -> None:
    if may_take(task, user, transition):
        return
    verb = transition.action
    if transition.who == "assignee":
        raise Forbidden(f"only the technician assigned to task {task.id} can {verb} it")
    if transition.who == "reviewer":
        raise Forbidden(f"only a reviewer (the one assigned to task {task.id}, if any) or an admin can {verb} it")
    raise Forbidden(f"your role ({user.role}) may not {verb} tasks; reviewers and admins can")
