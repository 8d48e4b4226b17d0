"""Task use cases: bulk creation, reassignment and the state machine's transitions. Never commits.

Every transition locks the task row first (``SELECT ... FOR UPDATE`` on PostgreSQL; SQLite writers hold the
database write lock from BEGIN), so two people acting on one task at once are serialised and the second one
sees the first one's result (usually a 409).
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import select, update
from sqlalchemy.orm import Session

from tracedesk.accounts.permissions import Permission, role_allows
from tracedesk.archive.service import get_collection
from tracedesk.audit.service import Actor, created_fields, field_changes, record_event
from tracedesk.digitizing.calibrations import calibration_of
from tracedesk.digitizing.traces import traces_of_sheet
from tracedesk.errors import Conflict, Unprocessable
from tracedesk.models import Sheet, Signature, Task, User
from tracedesk.models.base import utcnow
from tracedesk.workflow.access import require_may_take
from tracedesk.workflow.collection_settings import settings_of
from tracedesk.workflow.notices import notify
from tracedesk.workflow.schemas import TaskBulkCreate, TaskUpdate
from tracedesk.workflow.states import REASSIGNABLE_STATES, SHEET_STATUS_FOR, check_transition, transition_for

TASK_FIELDS = (
    "state",
    "technician_id",
    "second_technician_id",
    "reviewer_id",
    "priority",
    "due_date",
    "double_digitization",
)
ASSIGNMENT_FIELDS = ("technician_id", "second_technician_id", "reviewer_id")
UPDATABLE_FIELDS = (
    "technician_id",
    "second_technician_id",
    "reviewer_id",
    "priority",
    "due_date",
    "double_digitization",
)
CLEARABLE_FIELDS = frozenset({"technician_id", "second_technician_id", "reviewer_id", "due_date"})


def actor_of(user: User) -> Actor:
    return Actor(id=user.id, name=user.display_name)


def _values(task: Task) -> dict[str, Any]:
    return {name: getattr(task, name) for name in TASK_FIELDS}


def _audit(
    session: Session, task: Task, *, actor: Actor, action: str, changes: dict[str, Any], reason: str | None
) -> None:
    record_event(
        session,
        actor=actor,
        action=action,
        entity_type="task",
        entity_id=task.id,
        entity_version=task.version,
        changes=changes,
        reason=reason,
    )


def _check_person(session: Session, user_id: int, permission: Permission, label: str) -> User:
    user = session.get(User, user_id)
    if user is None or not user.is_active:
        raise Unprocessable(f"{label}: there is no active person with id {user_id}")
    if not role_allows(user.role, permission):
        raise Unprocessable(f"{label}: {user.display_name} is a {user.role} and cannot {permission.value}")
    return user


def check_assignees(
    session: Session, technician_id: int | None, second_id: int | None, reviewer_id: int | None, *, double: bool
) -> None:
    """The people exist, are active, have the right role, and nobody both digitizes and reviews (four eyes)."""
    if technician_id is not None:
        _check_person(session, technician_id, Permission.DIGITIZE, "technician")
    if second_id is not None:
        if not double:
            raise Unprocessable("a second technician is only for double digitization; turn it on for the task first")
        _check_person(session, second_id, Permission.DIGITIZE, "second technician")
        if second_id == technician_id:
            raise Unprocessable("double digitization needs two different technicians")
    if reviewer_id is not None:
        _check_person(session, reviewer_id, Permission.REVIEW, "reviewer")
        if reviewer_id in (technician_id, second_id):
            raise Unprocessable("the reviewer cannot also digitize the sheet: an author may never approve")


def _candidate_sheets(session: Session, collection_id: int, sheet_ids: list[int] | None) -> list[Sheet]:
    if sheet_ids is None:
        query = select(Sheet).where(Sheet.collection_id == collection_id).order_by(Sheet.id)
        return list(session.scalars(query))
    sheets = {sheet.id: sheet for sheet in session.scalars(select(Sheet).where(Sheet.id.in_(set(sheet_ids))))}
    for sheet_id in sheet_ids:
        if sheet_id not in sheets or sheets[sheet_id].collection_id != collection_id:
            raise Unprocessable(f"sheet {sheet_id} is not in collection {collection_id}")
    return [sheets[sheet_id] for sheet_id in dict.fromkeys(sheet_ids)]


def create_tasks(
    session: Session, collection_id: int, body: TaskBulkCreate, *, actor: Actor
) -> tuple[list[Task], list[tuple[int, str]]]:
    """One task per listed sheet (or per sheet of the collection without one); sheets with a task are skipped."""
    collection = get_collection(session, collection_id)
    double = bool(settings_of(session, collection_id).double_digitization)
    check_assignees(session, body.technician_id, body.second_technician_id, body.reviewer_id, double=double)
    existing = dict(session.execute(select(Task.sheet_id, Task.id).where(Task.collection_id == collection_id)).all())
    created: list[Task] = []
    skipped: list[tuple[int, str]] = []
    for sheet in _candidate_sheets(session, collection_id, body.sheet_ids):
        if sheet.id in existing:
            skipped.append((sheet.id, f"the sheet has a task already (task {existing[sheet.id]})"))
        elif sheet.status == "withdrawn":
            skipped.append((sheet.id, "the sheet is withdrawn"))
        else:
            created.append(_new_task(session, sheet, body, double=double, actor=actor))
    _notify_assigned(session, created, collection.name, actor=actor)
    return created, skipped


def _new_task(session: Session, sheet: Sheet, body: TaskBulkCreate, *, double: bool, actor: Actor) -> Task:
    task = Task(
        sheet_id=sheet.id,
        collection_id=sheet.collection_id,
        state="open",
        technician_id=body.technician_id,
        second_technician_id=body.second_technician_id,
        reviewer_id=body.reviewer_id,
        priority=body.priority,
        due_date=body.due_date,
        double_digitization=double,
        technician_submitted=False,
        second_submitted=False,
        created_by_id=actor.id,
    )
    session.add(task)
    session.flush()
    _audit(session, task, actor=actor, action="create", changes=created_fields(_values(task)), reason=None)
    return task


def _notify_assigned(session: Session, tasks: list[Task], place: str, *, actor: Actor) -> None:
    """One notice per person and batch ("5 sheets in ..."), not one per sheet."""
    by_person: dict[tuple[int, str], list[Task]] = {}
    for task in tasks:
        for field, role in (
            ("technician_id", "digitize"),
            ("second_technician_id", "digitize"),
            ("reviewer_id", "review"),
        ):
            user_id = getattr(task, field)
            if user_id is not None:
                by_person.setdefault((user_id, role), []).append(task)
    for (user_id, role), assigned in by_person.items():
        count = len(assigned)
        what = f"sheet {assigned[0].sheet_id}" if count == 1 else f"{count} sheets"
        message = f"{actor.name} asked you to {role} {what} of {place}."
        notify(session, [user_id], kind="assigned", message=message, task_id=assigned[0].id, skip=actor.id)


def update_task(session: Session, task: Task, body: TaskUpdate, *, actor: Actor) -> Task:
    """Reassign or re-plan a task (reviewers and admins; checked by the caller)."""
    if task.state not in REASSIGNABLE_STATES:
        raise Conflict(f"a task that is {task.state} cannot be reassigned; reopen it first")
    sent = body.model_fields_set
    before = _values(task)
    after = dict(before)
    for name in UPDATABLE_FIELDS:
        value = getattr(body, name)
        if name in sent and (value is not None or name in CLEARABLE_FIELDS):
            after[name] = value
    if not after["double_digitization"]:
        after["second_technician_id"] = None
    check_assignees(
        session,
        after["technician_id"],
        after["second_technician_id"],
        after["reviewer_id"],
        double=bool(after["double_digitization"]),
    )
    changes = field_changes(before, after)
    if not changes:
        return task
    for name, value in after.items():
        setattr(task, name, value)
    if "technician_id" in changes:
        task.technician_submitted = False
    if "second_technician_id" in changes or "double_digitization" in changes:
        task.second_submitted = False
    task.version += 1
    task.updated_at = utcnow()
    reassigned = any(name in changes for name in ASSIGNMENT_FIELDS)
    _audit(
        session, task, actor=actor, action="reassign" if reassigned else "update", changes=changes, reason=body.reason
    )
    newcomers = [after[name] for name in ASSIGNMENT_FIELDS if name in changes]
    message = f"{actor.name} assigned you to task {task.id} (sheet {task.sheet_id})."
    notify(session, newcomers, kind="assigned", message=message, task_id=task.id, skip=actor.id)
    return task


def sheet_has_work(session: Session, sheet_id: int) -> bool:
    return calibration_of(session, sheet_id) is not None or bool(traces_of_sheet(session, sheet_id))


def sync_sheet_status(session: Session, task: Task, *, actor: Actor, cause: str) -> None:
    """Keep the sheet's status in step with its task (an audited sheet change, like ``mark_work_started``)."""
    sheet = session.get(Sheet, task.sheet_id)
    if sheet is None:
        return
    target = SHEET_STATUS_FOR.get(task.state) or ("in_progress" if sheet_has_work(session, sheet.id) else "ready")
    if sheet.status == target:
        return
    old, sheet.status = sheet.status, target
    sheet.version += 1
    record_event(
        session,
        actor=actor,
        action="update",
        entity_type="sheet",
        entity_id=sheet.id,
        entity_version=sheet.version,
        changes={"status": {"old": old, "new": target}},
        reason=cause,
    )


def _check_submission(session: Session, task: Task, user: User) -> None:
    if calibration_of(session, task.sheet_id) is None:
        raise Unprocessable("nothing to submit yet: calibrate the sheet first")
    traces = traces_of_sheet(session, task.sheet_id)
    if not traces:
        raise Unprocessable("nothing to submit yet: the sheet has no traces")
    if not task.double_digitization:
        return
    if task.technician_id is None or task.second_technician_id is None:
        raise Conflict("double digitization needs two technicians assigned before it can be submitted")
    if not any(trace.created_by_id == user.id for trace in traces):
        raise Unprocessable("you have no traces of your own on this sheet yet (double digitization)")
    done = task.technician_submitted if user.id == task.technician_id else task.second_submitted
    if done:
        raise Conflict("you have submitted your part already; the task waits for the other technician")


def _submit(session: Session, task: Task, user: User) -> str:
    """Mark the caller's part submitted; the task is submitted once every part is in. Returns the audit action."""
    _check_submission(session, task, user)
    if task.double_digitization:
        if user.id == task.technician_id:
            task.technician_submitted = True
        else:
            task.second_submitted = True
        if not (task.technician_submitted and task.second_submitted):
            return "submit_part"
    else:
        task.technician_submitted = True
    task.state = "submitted"
    task.submitted_at = utcnow()
    return "submit"


def _withdraw_signatures(session: Session, task: Task, reason: str) -> None:
    session.execute(
        update(Signature)
        .where(Signature.task_id == task.id, Signature.withdrawn_at.is_(None))
        .values(withdrawn_at=utcnow(), withdrawn_reason=reason)
    )


def take_action(session: Session, task: Task, action: str, *, user: User, reason: str | None = None) -> Task:
    """Start, submit, return, withdraw or reopen a task (approval is a signature: ``signatures.sign_task``).

    Checks, in order: who may take the action (403), whether the state allows it (409), the reason (422).
    """
    transition = transition_for(action)
    if action == "approve":
        raise Conflict("approval is an electronic signature: sign the task with your password")
    require_may_take(task, user, transition)
    check_transition(task.state, action)
    reason = (reason or "").strip() or None
    if transition.needs_reason and reason is None:
        raise Unprocessable(f"give a reason: a task is only {transition.past_tense} with one")
    before = _values(task)
    audit_action = action
    if action == "submit":
        audit_action = _submit(session, task, user)
    else:
        task.state = transition.target
    if action in {"return", "reopen", "withdraw"}:
        task.reason = reason
    if action in {"return", "reopen"}:
        task.technician_submitted = task.second_submitted = False
    if action == "reopen":
        task.approved_at = None
        _withdraw_signatures(session, task, f"task reopened: {reason}")
    task.version += 1
    task.updated_at = utcnow()
    actor = actor_of(user)
    changes = field_changes(before, _values(task))
    _audit(session, task, actor=actor, action=audit_action, changes=changes, reason=reason)
    sync_sheet_status(session, task, actor=actor, cause=f"task {task.id} {transition.past_tense}")
    _notify_transition(session, task, audit_action, actor=actor, reason=reason)
    return task


def submit_automatic(session: Session, task: Task, *, actor: Actor, reason: str) -> Task:
    """Start and submit an open task for review on behalf of an automatic digitizer (a batch run).

    ``actor`` is the run itself (no user id), so the digitization has no human author and any reviewer may
    sign it (four eyes: the machine wrote it, a person approves it). The state machine still applies (409
    from any state but open or returned); double digitization needs two people's work, so it is refused.
    """
    if task.double_digitization:
        raise Conflict("a task with double digitization needs two technicians' work; it cannot be submitted by a batch")
    if calibration_of(session, task.sheet_id) is None or not traces_of_sheet(session, task.sheet_id):
        raise Unprocessable("nothing to submit yet: the sheet needs a calibration and traces")
    for action in ("start", "submit"):
        transition = check_transition(task.state, action)
        before = _values(task)
        task.state = transition.target
        if action == "submit":
            task.technician_submitted = True
            task.submitted_at = utcnow()
        task.version += 1
        task.updated_at = utcnow()
        _audit(session, task, actor=actor, action=action, changes=field_changes(before, _values(task)), reason=reason)
    sync_sheet_status(session, task, actor=actor, cause=f"task {task.id} submitted")
    _notify_transition(session, task, "submit", actor=actor, reason=None)
    return task


def flag_for_attention(session: Session, task: Task, *, actor: Actor, reason: str) -> Task:
    """Record on an open task why a person must look at the sheet (a batch run's verdict), audited."""
    if task.state not in transition_for("start").sources:
        raise Conflict(f"only an open or returned task waits for a person; task {task.id} is {task.state}")
    if task.reason == reason:
        return task
    old, task.reason = task.reason, reason
    task.version += 1
    task.updated_at = utcnow()
    _audit(session, task, actor=actor, action="flag", changes={"reason": {"old": old, "new": reason}}, reason=reason)
    return task


def _notify_transition(session: Session, task: Task, action: str, *, actor: Actor, reason: str | None) -> None:
    technicians = [task.technician_id, task.second_technician_id]
    sheet = f"sheet {task.sheet_id} (task {task.id})"
    because = f": {reason}" if reason else ""
    recipients: dict[str, tuple[list[int | None], str]] = {
        "submit": ([task.reviewer_id], f"{actor.name} submitted {sheet} for review."),
        "return": (technicians, f"{actor.name} returned {sheet}{because}"),
        "withdraw": ([*technicians, task.reviewer_id], f"{actor.name} withdrew {sheet}{because}"),
        "reopen": ([*technicians, task.reviewer_id], f"{actor.name} reopened {sheet}{because}"),
    }
    if action in recipients:
        users, message = recipients[action]
        kind = {"submit": "submitted", "return": "returned", "withdraw": "withdrawn", "reopen": "reopened"}[action]
        notify(session, users, kind=kind, message=message, task_id=task.id, skip=actor.id)
