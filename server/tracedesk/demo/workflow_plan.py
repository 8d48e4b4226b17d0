"""The demo's review workflow: a task per sheet, taken to the state the scenario asks for, through the
workflow services (so assignments, transitions, the pinned comment and the signature are audited as their
people's own).

Before a sheet is digitized its task is created and started; afterwards it is submitted, commented on,
returned, signed (approved) or withdrawn. Each step first looks at the task's current state and only takes the
steps still missing on the way to the target, so loading again changes nothing.
"""

from __future__ import annotations

import numpy as np
from argon2 import PasswordHasher
from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor
from tracedesk.db import transaction
from tracedesk.demo.digitize import LazyRender, WorkLog
from tracedesk.demo.scenarios import DemoSheet
from tracedesk.demo.truth import pen_pixels_at
from tracedesk.errors import AppError
from tracedesk.models import ReviewComment, Task, User
from tracedesk.web.state import AppState
from tracedesk.workflow.comments import add_comment
from tracedesk.workflow.schemas import CommentCreate, TaskBulkCreate
from tracedesk.workflow.signatures import sign_task
from tracedesk.workflow.tasks import create_tasks, take_action

# The actions that lead from a new (open) task to each target state, in order.
PATHS: dict[str, tuple[str, ...]] = {
    "open": (),
    "in_progress": ("start",),
    "submitted": ("start", "submit"),
    "returned": ("start", "submit", "return"),
    "approved": ("start", "submit", "approve"),
    "withdrawn": ("withdraw",),
}
STATE_AFTER = {
    "start": "in_progress",
    "submit": "submitted",
    "return": "returned",
    "approve": "approved",
    "withdraw": "withdrawn",
}
# Steps taken before the sheet is digitized (the technician starts work first); the rest come after.
BEFORE_DIGITIZING = frozenset({"start"})


def _task_of(session: Session, sheet_id: int, *, lock: bool = False) -> Task | None:
    """The sheet's task; ``lock`` takes the row lock the workflow services expect around a transition."""
    query = select(Task).where(Task.sheet_id == sheet_id)
    return session.scalar(query.with_for_update() if lock else query)


def _user(session: Session, actor: Actor) -> User:
    user = session.get(User, actor.id)
    assert user is not None, f"demo account {actor.name} vanished during loading"
    return user


def _remaining(plan: DemoSheet, state: str) -> tuple[str, ...]:
    """The steps of the plan's path still to take from ``state`` (none if the task went its own way)."""
    path = PATHS[plan.workflow]
    reached = ["open", *(STATE_AFTER[action] for action in path)]
    if state not in reached:
        return ()
    return path[reached.index(state) :]


def ensure_task(
    state: AppState, plan: DemoSheet, sheet_id: int, collection_id: int, actors: dict[str, Actor], log: WorkLog
) -> None:
    """Create the sheet's task (assigned by the demo administrator) and start it if the plan goes further."""
    with transaction(state.writer) as session:
        if _task_of(session, sheet_id) is None:
            body = TaskBulkCreate(
                sheet_ids=[sheet_id],
                technician_id=actors[plan.digitizer].id if plan.assigned else None,
                reviewer_id=actors["reviewer"].id,
            )
            create_tasks(session, collection_id, body, actor=actors["admin"])
            log.created += 1
    _advance(state, plan, sheet_id, actors, {}, log, only=BEFORE_DIGITIZING)


def _comment(session: Session, plan: DemoSheet, task: Task, reviewer: User, render: LazyRender) -> None:
    exists = session.scalar(
        select(ReviewComment.id).where(ReviewComment.task_id == task.id, ReviewComment.body == plan.review_comment)
    )
    if exists is not None:
        return
    pen = render.truth.pens[0]
    u, v = pen_pixels_at(pen, np.array([plan.comment_at]))[0]
    add_comment(
        session,
        task,
        CommentCreate(body=plan.review_comment, u=round(float(u), 1), v=round(float(v), 1)),
        user=reviewer,
    )


def _take(
    session: Session,
    hasher: PasswordHasher,
    plan: DemoSheet,
    task: Task,
    action: str,
    actors: dict[str, Actor],
    passwords: dict[str, str],
    render: LazyRender | None,
) -> None:
    """One step, by the person whose step it is (every service checks before it writes)."""
    if action == "approve":
        reviewer = _user(session, actors["reviewer"])
        password = passwords.get(reviewer.username)
        if password is None:
            raise AppError("the demo reviewer's password was not generated in this run, so the loader cannot sign")
        sign_task(session, task, signer=reviewer, password=password, meaning="approved", hasher=hasher)
        return
    if action == "return" and plan.review_comment and render is not None:
        _comment(session, plan, task, _user(session, actors["reviewer"]), render)
    who = {"start": plan.digitizer, "submit": plan.digitizer, "return": "reviewer", "withdraw": "admin"}[action]
    reason = (plan.workflow_reason or None) if action in {"return", "withdraw"} else None
    take_action(session, task, action, user=_user(session, actors[who]), reason=reason)


def _advance(
    state: AppState,
    plan: DemoSheet,
    sheet_id: int,
    actors: dict[str, Actor],
    passwords: dict[str, str],
    log: WorkLog,
    *,
    only: frozenset[str] | None = None,
    render: LazyRender | None = None,
) -> None:
    with transaction(state.writer) as session:
        task = _task_of(session, sheet_id, lock=True)
        if task is None:
            return
        try:
            for action in _remaining(plan, task.state):
                if only is not None and action not in only:
                    break
                _take(session, state.hasher, plan, task, action, actors, passwords, render)
                log.created += 1
        except AppError as error:
            log.notes.append(f"{plan.filename}: the task could not be taken to {plan.workflow} ({error.message})")


def finish_task(
    state: AppState,
    plan: DemoSheet,
    sheet_id: int,
    actors: dict[str, Actor],
    passwords: dict[str, str],
    render: LazyRender,
    log: WorkLog,
) -> None:
    """Take the task the rest of the way: submit, comment and return, sign, or withdraw."""
    _advance(state, plan, sheet_id, actors, passwords, log, render=render)
