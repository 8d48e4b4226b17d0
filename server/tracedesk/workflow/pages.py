"""HTML routes of the team workflow: "my work", the collection board, and the review page of a task with its
actions, signature form, pinned comments, changes since submission and double-digitization agreement.

Forms post back here and redirect (303) to the page they came from; a refusal re-renders the page with the
message and the refusal's status code. Every page shows its data without JavaScript.
"""

from __future__ import annotations

import io
from datetime import date
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from pydantic import ValidationError
from sqlalchemy import select

from tracedesk.accounts.permissions import Permission, role_allows
from tracedesk.archive.service import get_collection, get_sheet, list_collections
from tracedesk.digitizing.fits import fits_of_trace
from tracedesk.digitizing.traces import traces_of_sheet
from tracedesk.errors import AppError, NotFound, PreconditionFailed
from tracedesk.exports.overlay import Mark, render_sheet_overlay
from tracedesk.exports.selection import parse_sheet_ids
from tracedesk.models import Task, User
from tracedesk.web.deps import Principal, SessionDep, client_address, requires
from tracedesk.web.state import app_state
from tracedesk.web.templating import render
from tracedesk.workflow import board, comments, double, notices, tasks
from tracedesk.workflow.access import find_task, require_may_take, visibility_condition
from tracedesk.workflow.changes import changes_around_submission
from tracedesk.workflow.collection_settings import settings_of, settings_read, update_settings
from tracedesk.workflow.record import sheet_record
from tracedesk.workflow.schemas import CommentCreate, TaskBulkCreate, TaskUpdate
from tracedesk.workflow.settings_form import settings_update_from_form
from tracedesk.workflow.signatures import (
    SignatureRefused,
    approval_status,
    check_four_eyes,
    record_refusal,
    sign_task,
    task_signature_statuses,
)
from tracedesk.workflow.states import TRANSITIONS, transition_for
from tracedesk.workflow.views import comment_reads, people_by_id, task_read, task_reads

router = APIRouter(include_in_schema=False)
Reader = Annotated[Principal, Depends(requires(Permission.READ))]
Manager = Annotated[Principal, Depends(requires(Permission.MANAGE_TASKS))]
PREVIEW_SIDE = 1600
FORM_ACTIONS = ("start", "submit", "return", "withdraw", "reopen")


def _user(db: SessionDep, principal: Principal) -> User:
    user = db.get(User, principal.user.id)
    if user is None:
        raise NotFound("your account is gone")
    return user


def _optional_int(text: str) -> int | None:
    return int(text) if text.strip() else None


def _assignable(db: SessionDep) -> dict[str, list[User]]:
    users = list(db.scalars(select(User).where(User.is_active.is_(True)).order_by(User.display_name)))
    return {
        "technicians": [u for u in users if role_allows(u.role, Permission.DIGITIZE)],
        "reviewers": [u for u in users if role_allows(u.role, Permission.REVIEW)],
    }


@router.get("/work", response_class=HTMLResponse)
def work_page(request: Request, principal: Reader, db: SessionDep) -> Response:
    user = _user(db, principal)
    context = {
        "work": board.my_work(db, user),
        "notices": notices.notices_of(db, user.id)[:30],
        "collections": [collection for collection, _ in list_collections(db)],
        "can_review": principal.can(Permission.REVIEW),
    }
    return render(request, "workflow/work.html", principal, context)


@router.post("/notices/read")
def notices_read(principal: Reader, db: SessionDep) -> Response:
    notices.mark_read(db, principal.user.id)
    return RedirectResponse("/work", status_code=303)


def _board_page(
    request: Request, principal: Principal, db: SessionDep, collection_id: int, *, state: str = "", message: str = ""
) -> Response:
    user = _user(db, principal)
    collection = get_collection(db, collection_id)
    query = select(Task).where(Task.collection_id == collection_id).order_by(Task.sheet_id).limit(1000)
    condition = visibility_condition(user)
    if condition is not None:
        query = query.where(condition)
    if state:
        query = query.where(Task.state == state)
    can_manage = principal.can(Permission.MANAGE_TASKS)
    context: dict[str, Any] = {
        "collection": collection,
        "board": board.collection_board(db, collection_id, user),
        "tasks": task_reads(db, list(db.scalars(query)), user),
        "state": state,
        "settings": settings_read(settings_of(db, collection_id)),
        "can_manage": can_manage,
        "people": _assignable(db) if can_manage else {},
        "message": message,
    }
    status = 200 if not message else 422
    return render(request, "workflow/board.html", principal, context, status_code=status)


@router.get("/collections/{collection_id}/tasks", response_class=HTMLResponse)
def board_page(request: Request, collection_id: int, principal: Reader, db: SessionDep, state: str = "") -> Response:
    return _board_page(request, principal, db, collection_id, state=state)


@router.post("/collections/{collection_id}/tasks", response_class=HTMLResponse)
def board_create_tasks(
    request: Request,
    collection_id: int,
    principal: Manager,
    db: SessionDep,
    sheet_ids: Annotated[str, Form(max_length=20_000)] = "",
    technician_id: Annotated[str, Form()] = "",
    second_technician_id: Annotated[str, Form()] = "",
    reviewer_id: Annotated[str, Form()] = "",
    priority: Annotated[str, Form()] = "normal",
    due_date: Annotated[str, Form()] = "",
) -> Response:
    try:
        body = TaskBulkCreate(
            sheet_ids=parse_sheet_ids(sheet_ids),
            technician_id=_optional_int(technician_id),
            second_technician_id=_optional_int(second_technician_id),
            reviewer_id=_optional_int(reviewer_id),
            priority=priority,
            due_date=date.fromisoformat(due_date) if due_date else None,
        )
        tasks.create_tasks(db, collection_id, body, actor=principal.actor)
    except (AppError, ValidationError, ValueError) as error:
        db.rollback()
        message = error.message if isinstance(error, AppError) else "check the task fields"
        return _board_page(request, principal, db, collection_id, message=message)
    return RedirectResponse(f"/collections/{collection_id}/tasks", status_code=303)


@router.post("/collections/{collection_id}/workflow", response_class=HTMLResponse)
def board_settings(
    request: Request,
    collection_id: int,
    principal: Manager,
    db: SessionDep,
    version: Annotated[int, Form()],
    double_digitization: Annotated[str, Form()] = "",
    tolerance: Annotated[str, Form()] = "",
    min_confidence: Annotated[str, Form(max_length=40)] = "",
    max_registration_rms_px: Annotated[str, Form(max_length=40)] = "",
    min_coverage: Annotated[str, Form(max_length=40)] = "",
    max_gaps: Annotated[str, Form(max_length=40)] = "",
    min_gap_fraction: Annotated[str, Form(max_length=40)] = "",
    min_r_squared: Annotated[str, Form(max_length=40)] = "",
    batch_fit: Annotated[str, Form(max_length=4000)] = "",
) -> Response:
    get_collection(db, collection_id)
    if version != settings_of(db, collection_id).version:
        raise PreconditionFailed("someone changed these settings meanwhile; reload the page and try again")
    thresholds = {
        "min_confidence": min_confidence,
        "max_registration_rms_px": max_registration_rms_px,
        "min_coverage": min_coverage,
        "max_gaps": max_gaps,
        "min_gap_fraction": min_gap_fraction,
        "min_r_squared": min_r_squared,
    }
    try:
        body = settings_update_from_form(
            double_digitization=double_digitization, tolerance=tolerance, thresholds=thresholds, batch_fit=batch_fit
        )
        update_settings(db, collection_id, body, actor=principal.actor)
    except (ValidationError, ValueError):
        db.rollback()
        message = (
            "check the settings: the tolerance is a positive number, each threshold a number in its range, "
            'and the fit JSON names its family, e.g. {"family": "fourier", "degree": 2}'
        )
        return _board_page(request, principal, db, collection_id, message=message)
    return RedirectResponse(f"/collections/{collection_id}/tasks", status_code=303)


def _traces_with_fits(db: SessionDep, sheet_id: int) -> list[dict[str, Any]]:
    traces = traces_of_sheet(db, sheet_id)
    authors = people_by_id(db, [trace.created_by_id for trace in traces])
    return [
        {
            "trace": trace,
            "author": authors[trace.created_by_id].display_name if trace.created_by_id in authors else "",
            "fits": fits_of_trace(db, trace.id),
        }
        for trace in traces
    ]


def _agreement(db: SessionDep, task: Task) -> tuple[double.AgreementReport | None, str]:
    if not task.double_digitization:
        return None, ""
    try:
        return double.compare_task(db, task, tolerance=settings_of(db, task.collection_id).tolerance), ""
    except AppError as error:
        return None, error.message


def _task_context(db: SessionDep, task: Task, user: User, principal: Principal) -> dict[str, Any]:
    item = get_sheet(db, task.sheet_id)
    statuses = task_signature_statuses(db, task)
    agreement, agreement_problem = _agreement(db, task)
    can_manage = principal.can(Permission.MANAGE_TASKS)
    return {
        "task": task_read(db, task, user),
        "sheet": item.sheet,
        "sha256": item.source.sha256,
        "collection": get_collection(db, task.collection_id),
        "record_sha256": sheet_record(db, item.sheet).sha256,
        "signatures": statuses,
        "approval": approval_status(statuses),
        "changes": changes_around_submission(db, task),
        "comments": comment_reads(db, comments.comments_of(db, task.id)),
        "traces": _traces_with_fits(db, task.sheet_id),
        "agreement": agreement,
        "agreement_problem": agreement_problem,
        "transitions": TRANSITIONS,
        "form_actions": FORM_ACTIONS,
        "people": _assignable(db) if can_manage else {},
        "preview_url": f"/tasks/{task.id}/overlay.png",
        "four_eyes_problem": _four_eyes_problem(db, task, user),
    }


def _four_eyes_problem(db: SessionDep, task: Task, user: User) -> str:
    """Why the caller may not sign this task's sheet (shown instead of the signature form), or ""."""
    try:
        check_four_eyes(db, task, user)
    except AppError as error:
        return error.message
    return ""


def _task_page(
    request: Request, principal: Principal, db: SessionDep, task_id: int, *, message: str = "", status_code: int = 200
) -> Response:
    user = _user(db, principal)
    task = find_task(db, task_id, user)
    context = _task_context(db, task, user, principal)
    context["message"] = message
    return render(request, "workflow/task.html", principal, context, status_code=status_code)


def _refused(request: Request, principal: Principal, db: SessionDep, task_id: int, error: AppError) -> Response:
    db.rollback()
    return _task_page(request, principal, db, task_id, message=error.message, status_code=error.status_code)


def _back(task_id: int) -> Response:
    return RedirectResponse(f"/tasks/{task_id}", status_code=303)


@router.get("/tasks/{task_id}", response_class=HTMLResponse)
def task_page(request: Request, task_id: int, principal: Reader, db: SessionDep) -> Response:
    return _task_page(request, principal, db, task_id)


def _check_version(task: Task, version: int) -> None:
    if version != task.version:
        raise PreconditionFailed("someone else changed this task meanwhile; reload the page and try again")


@router.post("/tasks/{task_id}/action", response_class=HTMLResponse)
def task_action_form(
    request: Request,
    task_id: int,
    principal: Reader,
    db: SessionDep,
    action: Annotated[str, Form(max_length=20)],
    version: Annotated[int, Form()],
    reason: Annotated[str, Form(max_length=2000)] = "",
) -> Response:
    user = _user(db, principal)
    try:
        task = find_task(db, task_id, user, lock=True)
        _check_version(task, version)
        if action not in FORM_ACTIONS:
            raise NotFound(f"no task action {action!r}")
        tasks.take_action(db, task, action, user=user, reason=reason)
    except AppError as error:
        return _refused(request, principal, db, task_id, error)
    return _back(task_id)


@router.post("/tasks/{task_id}/sign", response_class=HTMLResponse)
def task_sign_form(
    request: Request,
    task_id: int,
    principal: Reader,
    db: SessionDep,
    password: Annotated[str, Form(max_length=1024)],
    version: Annotated[int, Form()],
    meaning: Annotated[str, Form()] = "approved",
) -> Response:
    user = _user(db, principal)
    task = find_task(db, task_id, user, lock=True)
    try:
        _check_version(task, version)
        if meaning not in ("approved", "reviewed"):
            raise NotFound(f"no signature meaning {meaning!r}")
        sign_task(db, task, signer=user, password=password, meaning=meaning, hasher=app_state(request).hasher)
    except SignatureRefused as error:
        record_refusal(db, task, user, address=client_address(request))
        return _task_page(request, principal, db, task_id, message=error.message, status_code=403)
    except AppError as error:
        return _refused(request, principal, db, task_id, error)
    return _back(task_id)


@router.post("/tasks/{task_id}/comments", response_class=HTMLResponse)
def task_comment_form(
    request: Request,
    task_id: int,
    principal: Reader,
    db: SessionDep,
    body: Annotated[str, Form(max_length=5000)],
    u: Annotated[str, Form()] = "",
    v: Annotated[str, Form()] = "",
) -> Response:
    user = _user(db, principal)
    try:
        task = find_task(db, task_id, user)
        comment = CommentCreate(body=body, u=float(u) if u.strip() else None, v=float(v) if v.strip() else None)
        comments.add_comment(db, task, comment, user=user)
    except AppError as error:
        return _refused(request, principal, db, task_id, error)
    except (ValidationError, ValueError):
        db.rollback()
        message = "a comment needs text, and a pin needs both positions (pixels)"
        return _task_page(request, principal, db, task_id, message=message, status_code=422)
    return _back(task_id)


@router.post("/tasks/{task_id}/comments/{comment_id}/resolve", response_class=HTMLResponse)
def task_comment_resolve(
    request: Request,
    task_id: int,
    comment_id: int,
    principal: Reader,
    db: SessionDep,
    resolved: Annotated[str, Form()] = "1",
) -> Response:
    user = _user(db, principal)
    try:
        task = find_task(db, task_id, user)
        comment = comments.get_comment(db, comment_id)
        if comment.task_id != task.id:
            raise NotFound(f"no comment with id {comment_id} on this task")
        comments.set_resolved(db, task, comment, resolved=resolved == "1", user=user)
    except AppError as error:
        return _refused(request, principal, db, task_id, error)
    return _back(task_id)


@router.post("/tasks/{task_id}/assign", response_class=HTMLResponse)
def task_assign_form(
    request: Request,
    task_id: int,
    principal: Manager,
    db: SessionDep,
    version: Annotated[int, Form()],
    technician_id: Annotated[str, Form()] = "",
    second_technician_id: Annotated[str, Form()] = "",
    reviewer_id: Annotated[str, Form()] = "",
    priority: Annotated[str, Form()] = "normal",
    due_date: Annotated[str, Form()] = "",
    reason: Annotated[str, Form(max_length=2000)] = "",
) -> Response:
    user = _user(db, principal)
    try:
        task = find_task(db, task_id, user, lock=True)
        _check_version(task, version)
        body = TaskUpdate(
            technician_id=_optional_int(technician_id),
            second_technician_id=_optional_int(second_technician_id),
            reviewer_id=_optional_int(reviewer_id),
            priority=priority,
            due_date=date.fromisoformat(due_date) if due_date else None,
            reason=reason or None,
        )
        tasks.update_task(db, task, body, actor=principal.actor)
    except AppError as error:
        return _refused(request, principal, db, task_id, error)
    except (ValidationError, ValueError):
        db.rollback()
        return _task_page(request, principal, db, task_id, message="check the assignment fields", status_code=422)
    return _back(task_id)


@router.post("/tasks/{task_id}/keep", response_class=HTMLResponse)
def task_keep_form(
    request: Request,
    task_id: int,
    principal: Reader,
    db: SessionDep,
    keep: Annotated[str, Form()],
    reason: Annotated[str, Form(max_length=2000)] = "",
) -> Response:
    user = _user(db, principal)
    try:
        task = find_task(db, task_id, user, lock=True)
        require_may_take(task, user, transition_for("return"))
        if keep not in ("first", "second"):
            raise NotFound(f"no technician {keep!r}")
        double.keep_one_set(db, task, keep=keep, reason=reason, actor=principal.actor)
    except AppError as error:
        return _refused(request, principal, db, task_id, error)
    return _back(task_id)


@router.get("/tasks/{task_id}/overlay.png")
def task_overlay(request: Request, task_id: int, principal: Reader, db: SessionDep) -> Response:
    """The review picture: traces and fits over the scan; for double digitization the second technician's traces
    in a second palette and a circle where each pair of traces differs most."""
    user = _user(db, principal)
    task = find_task(db, task_id, user)
    sheet = get_sheet(db, task.sheet_id).sheet
    marks: list[Mark] = []
    agreement, _ = _agreement(db, task)
    if agreement is not None:
        marks = [Mark(u, v, label) for u, v, label in double.difference_positions(db, task, agreement)]
    picture = render_sheet_overlay(
        db,
        app_state(request).store,
        sheet,
        max_side=PREVIEW_SIDE,
        second_author=task.second_technician_id if task.double_digitization else None,
        marks=marks,
    )
    buffer = io.BytesIO()
    picture.save(buffer, format="PNG")
    return Response(buffer.getvalue(), media_type="image/png", headers={"Cache-Control": "no-store"})
