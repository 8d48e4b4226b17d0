"""JSON routes of the team workflow under /api/v1: tasks and their transitions, signatures, review comments,
double-digitization agreement, the collection board, "my work" and notices."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Request, Response
from fastapi.responses import JSONResponse
from sqlalchemy import select
from sqlalchemy.exc import IntegrityError

from tracedesk.accounts.permissions import Permission, role_allows
from tracedesk.accounts.service import login_throttled
from tracedesk.archive.service import get_collection, get_sheet
from tracedesk.audit.schemas import AuditEventRead
from tracedesk.errors import Conflict, NotFound, TooManyRequests
from tracedesk.models import Task, User
from tracedesk.web.conditional import etag_for, require_if_match, set_etag
from tracedesk.web.deps import Principal, SessionDep, client_address, requires
from tracedesk.web.state import app_state
from tracedesk.workflow import board, comments, double, notices, tasks
from tracedesk.workflow.access import find_task, require_may_take, visibility_condition
from tracedesk.workflow.changes import changes_around_submission
from tracedesk.workflow.collection_settings import settings_of, settings_read, update_settings
from tracedesk.workflow.record import sheet_record
from tracedesk.workflow.schemas import (
    ActionIn,
    AgreementPairRead,
    AgreementRead,
    BoardRead,
    CommentCreate,
    CommentRead,
    CommentUpdate,
    KeepIn,
    NoticeRead,
    RecordRead,
    SignatureRead,
    SignIn,
    SkippedSheet,
    TaskBulkCreate,
    TaskBulkResult,
    TaskRead,
    TaskState,
    TaskUpdate,
    WorkflowSettingsRead,
    WorkflowSettingsUpdate,
    WorkQueueRead,
)
from tracedesk.workflow.signatures import (
    SignatureRefused,
    record_refusal,
    sign_task,
    signature_read,
    task_signature_statuses,
)
from tracedesk.workflow.states import transition_for
from tracedesk.workflow.views import comment_reads, task_read, task_reads

router = APIRouter(prefix="/api/v1", tags=["workflow"])
Reader = Annotated[Principal, Depends(requires(Permission.READ))]
Manager = Annotated[Principal, Depends(requires(Permission.MANAGE_TASKS))]
Reviewer = Annotated[Principal, Depends(requires(Permission.REVIEW))]
TaskAction = Literal["start", "submit", "return", "withdraw", "reopen"]
MAX_LISTED = 500


def _user(db: SessionDep, principal: Principal) -> User:
    """The caller's row in this request's transaction (fresh role and password hash)."""
    user = db.get(User, principal.user.id)
    if user is None:
        raise NotFound("your account is gone")
    return user


def _check_optional_if_match(request: Request, task: Task) -> None:
    """Actions are guarded by the state machine (409); an If-Match, when sent, also guards against staleness."""
    if request.headers.get("if-match"):
        require_if_match(request, "task", task.id, task.version)


def _task_response(db: SessionDep, task: Task, user: User, response: Response) -> TaskRead:
    set_etag(response, "task", task.id, task.version)
    return task_read(db, task, user)


@router.post("/collections/{collection_id}/tasks", response_model=TaskBulkResult, status_code=201)
def create_tasks(collection_id: int, body: TaskBulkCreate, principal: Manager, db: SessionDep) -> TaskBulkResult:
    """Create one task per sheet (the listed ones, or every sheet of the collection without a task)."""
    try:
        created, skipped = tasks.create_tasks(db, collection_id, body, actor=principal.actor)
    except IntegrityError as error:  # one task per sheet: someone created one for these sheets at the same moment
        raise Conflict("someone created tasks for some of these sheets at the same moment; reload") from error
    return TaskBulkResult(
        created=task_reads(db, created, _user(db, principal)),
        skipped=[SkippedSheet(sheet_id=sheet_id, reason=reason) for sheet_id, reason in skipped],
    )


@router.get("/tasks", response_model=list[TaskRead])
def list_tasks(
    principal: Reader,
    db: SessionDep,
    collection_id: int | None = None,
    state: TaskState | None = None,
    mine: bool = False,
) -> list[TaskRead]:
    """Tasks you may see (technicians: their own; reviewers and admins: all), newest first."""
    user = _user(db, principal)
    query = select(Task).order_by(Task.id.desc()).limit(MAX_LISTED)
    condition = visibility_condition(user)
    if condition is not None:
        query = query.where(condition)
    if mine:
        query = query.where(
            (Task.technician_id == user.id) | (Task.second_technician_id == user.id) | (Task.reviewer_id == user.id)
        )
    if collection_id is not None:
        query = query.where(Task.collection_id == collection_id)
    if state is not None:
        query = query.where(Task.state == state)
    return task_reads(db, list(db.scalars(query)), user)


@router.get("/tasks/{task_id}", response_model=TaskRead)
def get_task(task_id: int, principal: Reader, db: SessionDep, response: Response) -> TaskRead:
    user = _user(db, principal)
    return _task_response(db, find_task(db, task_id, user), user, response)


@router.get("/sheets/{sheet_id}/task", response_model=TaskRead)
def get_sheet_task(sheet_id: int, principal: Reader, db: SessionDep, response: Response) -> TaskRead:
    """The task of a sheet (404 when it has none, or it is not yours to see)."""
    user = _user(db, principal)
    task_id = db.scalar(select(Task.id).where(Task.sheet_id == sheet_id))
    if task_id is None:
        raise NotFound(f"sheet {sheet_id} has no task")
    return _task_response(db, find_task(db, task_id, user), user, response)


@router.patch("/tasks/{task_id}", response_model=TaskRead, responses={409: {}, 412: {}, 428: {}})
def update_task(
    task_id: int, body: TaskUpdate, principal: Manager, request: Request, db: SessionDep, response: Response
) -> TaskRead:
    """Reassign (technician, second technician, reviewer) or re-plan (priority, due date). Needs If-Match."""
    user = _user(db, principal)
    task = find_task(db, task_id, user, lock=True)
    require_if_match(request, "task", task.id, task.version)
    tasks.update_task(db, task, body, actor=principal.actor)
    return _task_response(db, task, user, response)


@router.post("/tasks/{task_id}/actions/{action}", response_model=TaskRead, responses={403: {}, 409: {}, 422: {}})
def task_action(
    task_id: int,
    action: TaskAction,
    principal: Reader,
    request: Request,
    db: SessionDep,
    response: Response,
    body: ActionIn | None = None,
) -> TaskRead:
    """Move a task through its states: open -> start -> in_progress -> submit -> submitted; a reviewer returns it
    (reason) -> returned -> start; reviewers and admins withdraw (reason) or reopen (reason). Anything else: 409.
    Approval is a signature: ``POST /tasks/{id}/signatures``."""
    user = _user(db, principal)
    task = find_task(db, task_id, user, lock=True)
    _check_optional_if_match(request, task)
    tasks.take_action(db, task, action, user=user, reason=body.reason if body else None)
    return _task_response(db, task, user, response)


@router.post(
    "/tasks/{task_id}/signatures", response_model=SignatureRead, status_code=201, responses={403: {}, 409: {}, 429: {}}
)
def sign(task_id: int, body: SignIn, principal: Reader, request: Request, db: SessionDep) -> Response:
    """Sign the task's sheet record with your password. ``approved`` also approves the task. The signature records
    your printed name, the meaning and the UTC time, bound to the SHA-256 of the record as it is now; the author of
    any part of the digitization can never sign it (403)."""
    state = app_state(request)
    user = _user(db, principal)
    task = find_task(db, task_id, user, lock=True)
    _check_optional_if_match(request, task)
    if login_throttled(db, state.settings, username=user.username, address=client_address(request)):
        raise TooManyRequests("too many wrong passwords: wait a few minutes before signing again")
    try:
        signature = sign_task(db, task, signer=user, password=body.password, meaning=body.meaning, hasher=state.hasher)
    except SignatureRefused as error:
        # Answered without raising, so the request's transaction keeps the record of the refusal.
        record_refusal(db, task, user, address=client_address(request))
        return JSONResponse({"detail": error.message, "code": error.code}, status_code=403)
    statuses = task_signature_statuses(db, task)
    current = next(status for status in statuses if status.signature.id == signature.id)
    response = JSONResponse(signature_read(current).model_dump(mode="json"), status_code=201)
    response.headers["ETag"] = etag_for("task", task.id, task.version)
    return response


@router.get("/tasks/{task_id}/signatures", response_model=list[SignatureRead])
def list_signatures(task_id: int, principal: Reader, db: SessionDep) -> list[SignatureRead]:
    """The task's signatures, each with ``valid`` false (and why) once the record changed after signing."""
    task = find_task(db, task_id, _user(db, principal))
    return [signature_read(status) for status in task_signature_statuses(db, task)]


@router.get("/sheets/{sheet_id}/record", response_model=RecordRead)
def get_record(sheet_id: int, _: Reader, db: SessionDep) -> RecordRead:
    """The sheet's digitized record in canonical JSON and its SHA-256 (what signatures are bound to)."""
    record = sheet_record(db, get_sheet(db, sheet_id).sheet)
    return RecordRead(sheet_id=sheet_id, sha256=record.sha256, canonical_json=record.canonical.decode("utf-8"))


@router.get("/tasks/{task_id}/changes")
def record_changes(task_id: int, principal: Reader, db: SessionDep) -> dict[str, Any]:
    """Changes to the sheet's calibration, traces and fits between the previous and the latest submission (the
    rework after a return) and after the latest submission, from the audit trail."""
    task = find_task(db, task_id, _user(db, principal))
    found = changes_around_submission(db, task)
    return {
        "submitted_seq": found.submitted_seq,
        "previous_submitted_seq": found.previous_submitted_seq,
        "in_rework": [AuditEventRead.model_validate(e).model_dump(mode="json") for e in found.in_rework],
        "after_submission": [AuditEventRead.model_validate(e).model_dump(mode="json") for e in found.after_submission],
    }


@router.get("/tasks/{task_id}/comments", response_model=list[CommentRead])
def list_comments(task_id: int, principal: Reader, db: SessionDep) -> list[CommentRead]:
    task = find_task(db, task_id, _user(db, principal))
    return comment_reads(db, comments.comments_of(db, task.id))


@router.post("/tasks/{task_id}/comments", response_model=CommentRead, status_code=201)
def add_comment(
    task_id: int, body: CommentCreate, principal: Reader, db: SessionDep, response: Response
) -> CommentRead:
    """A review comment, pinned to a sheet position ``u``, ``v`` (pixels from the top-left corner) or not."""
    user = _user(db, principal)
    task = find_task(db, task_id, user)
    comment = comments.add_comment(db, task, body, user=user)
    set_etag(response, "review_comment", comment.id, comment.version)
    return comment_reads(db, [comment])[0]


@router.patch("/comments/{comment_id}", response_model=CommentRead, responses={412: {}, 428: {}})
def update_comment(
    comment_id: int, body: CommentUpdate, principal: Reader, request: Request, db: SessionDep, response: Response
) -> CommentRead:
    """Resolve (or reopen) a comment. Needs If-Match."""
    user = _user(db, principal)
    comment = comments.get_comment(db, comment_id)
    task = find_task(db, comment.task_id, user)
    require_if_match(request, "review_comment", comment.id, comment.version)
    comments.set_resolved(db, task, comment, resolved=body.resolved, user=user)
    set_etag(response, "review_comment", comment.id, comment.version)
    return comment_reads(db, [comment])[0]


@router.get("/tasks/{task_id}/agreement", response_model=AgreementRead)
def agreement(task_id: int, principal: Reader, db: SessionDep) -> AgreementRead:
    """Double digitization: the two technicians' traces paired by name, with the maximum and RMS difference over
    their common x range (value units) against the collection's tolerance."""
    task = find_task(db, task_id, _user(db, principal))
    report = double.compare_task(db, task, tolerance=settings_of(db, task.collection_id).tolerance)
    return agreement_read(task.id, report)


def agreement_read(task_id: int, report: double.AgreementReport) -> AgreementRead:
    pairs = []
    for pair in report.pairs:
        found = pair.agreement
        pairs.append(
            AgreementPairRead(
                name=pair.name,
                unit=pair.first.unit,
                first_trace_id=pair.first.id,
                second_trace_id=pair.second.id,
                start=found.start if found else None,
                stop=found.stop if found else None,
                points=found.points if found else 0,
                max_difference=found.max_difference if found else None,
                max_at=found.max_at if found else None,
                rms_difference=found.rms_difference if found else None,
                agrees=pair.agrees(report.tolerance),
            )
        )
    return AgreementRead(
        task_id=task_id,
        tolerance=report.tolerance,
        status=report.status,
        pairs=pairs,
        only_first=[trace.name for trace in report.only_first],
        only_second=[trace.name for trace in report.only_second],
    )


@router.post("/tasks/{task_id}/keep", responses={403: {}, 409: {}})
def keep_traces(task_id: int, body: KeepIn, principal: Reviewer, db: SessionDep) -> dict[str, Any]:
    """Double digitization: keep the ``first`` or ``second`` technician's traces; the other set is withdrawn."""
    user = _user(db, principal)
    task = find_task(db, task_id, user, lock=True)
    require_may_take(task, user, transition_for("return"))
    withdrawn = double.keep_one_set(db, task, keep=body.keep, reason=body.reason, actor=principal.actor)
    return {"task_id": task.id, "kept": body.keep, "withdrawn_trace_ids": withdrawn}


@router.get("/collections/{collection_id}/board", response_model=BoardRead)
def collection_board(collection_id: int, principal: Reader, db: SessionDep) -> BoardRead:
    """Counts per state, progress, overdue tasks and each person's load for one collection."""
    return board.collection_board(db, collection_id, _user(db, principal))


@router.get("/collections/{collection_id}/workflow", response_model=WorkflowSettingsRead)
def get_workflow_settings(collection_id: int, _: Reader, db: SessionDep, response: Response) -> WorkflowSettingsRead:
    get_collection(db, collection_id)
    row = settings_of(db, collection_id)
    set_etag(response, "collection-workflow", collection_id, row.version)
    return settings_read(row)


@router.put("/collections/{collection_id}/workflow", response_model=WorkflowSettingsRead, responses={412: {}, 428: {}})
def put_workflow_settings(
    collection_id: int,
    body: WorkflowSettingsUpdate,
    principal: Manager,
    request: Request,
    db: SessionDep,
    response: Response,
) -> WorkflowSettingsRead:
    """Double digitization on or off for new tasks, and the agreement tolerance (value units). Needs If-Match."""
    get_collection(db, collection_id)
    require_if_match(request, "collection-workflow", collection_id, settings_of(db, collection_id).version)
    row = update_settings(db, collection_id, body, actor=principal.actor)
    set_etag(response, "collection-workflow", collection_id, row.version)
    return settings_read(row)


@router.get("/me/work", response_model=WorkQueueRead)
def my_work(principal: Reader, db: SessionDep) -> WorkQueueRead:
    """Your queue: sheets to digitize and sheets to review, most urgent first, and your unread notices."""
    return board.my_work(db, _user(db, principal))


@router.get("/people/assignable")
def assignable_people(_: Manager, db: SessionDep) -> list[dict[str, Any]]:
    """Active people who can digitize or review, for assignment forms."""
    users = db.scalars(select(User).where(User.is_active.is_(True)).order_by(User.display_name))
    return [
        {
            "id": user.id,
            "display_name": user.display_name,
            "role": user.role,
            "can_digitize": role_allows(user.role, Permission.DIGITIZE),
            "can_review": role_allows(user.role, Permission.REVIEW),
        }
        for user in users
        if role_allows(user.role, Permission.DIGITIZE) or role_allows(user.role, Permission.REVIEW)
    ]


@router.get("/notices", response_model=list[NoticeRead])
def list_notices(principal: Reader, db: SessionDep, unread: bool = False) -> list[NoticeRead]:
    """Your notices (assignments, submissions, returns, approvals, comments), newest first."""
    return [NoticeRead.model_validate(n) for n in notices.notices_of(db, principal.user.id, unread_only=unread)]


@router.post("/notices/{notice_id}/read", status_code=204)
def read_notice(notice_id: int, principal: Reader, db: SessionDep) -> Response:
    notices.mark_read(db, principal.user.id, notice_id)
    return Response(status_code=204)


@router.post("/notices/read", status_code=204)
def read_all_notices(principal: Reader, db: SessionDep) -> Response:
    notices.mark_read(db, principal.user.id)
    return Response(status_code=204)
