"""HTML routes of the exports: the admins' filtered audit log, with its CSV download and the chain check; the
bundle page of a collection (start a bundle job, list the recent ones) and the page of one bundle job, whose
progress bar ``export-bundle.js`` keeps moving (without JavaScript the page refreshes itself)."""

from __future__ import annotations

import json
from datetime import date
from typing import Annotated, Any
from urllib.parse import urlencode

from fastapi import APIRouter, Depends, Form, Query, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from pydantic import ValidationError
from sqlalchemy import func, select
from sqlalchemy.orm import Session
from starlette.concurrency import run_in_threadpool

from tracedesk.accounts.permissions import Permission
from tracedesk.archive.service import get_collection
from tracedesk.db import transaction
from tracedesk.errors import AppError
from tracedesk.exports.audit_log import AuditFilters, count_matching, distinct_values, page_of_events
from tracedesk.exports.bundle_jobs import (
    BUNDLE_KEEP,
    SYNC_MAX_SHEETS,
    bundle_view,
    recent_bundle_jobs,
    start_bundle_job,
    visible_bundle_job,
)
from tracedesk.exports.schemas import BundleCreate
from tracedesk.exports.selection import parse_sheet_ids
from tracedesk.models import Sheet, User
from tracedesk.web.deps import Principal, SessionDep, requires
from tracedesk.web.state import AppState, app_state
from tracedesk.web.templating import render

router = APIRouter(include_in_schema=False)
Auditor = Annotated[Principal, Depends(requires(Permission.VERIFY_AUDIT))]
Exporter = Annotated[Principal, Depends(requires(Permission.EXPORT))]
PAGE_SIZE = 100


@router.get("/admin/audit/log", response_class=HTMLResponse)
def filtered_audit_log(
    request: Request,
    principal: Auditor,
    db: SessionDep,
    entity_type: str = "",
    entity_id: Annotated[str, Query(max_length=64)] = "",
    actor_id: str = "",
    action: str = "",
    since: date | None = None,
    until: date | None = None,
    before: int | None = None,
) -> Response:
    """The audit trail filtered by record, person, action and UTC dates, newest first, 100 at a time."""
    filters = AuditFilters(
        entity_type=entity_type or None,
        entity_id=entity_id or None,
        actor_id=int(actor_id) if actor_id.strip().isdigit() else None,
        action=action or None,
        since=since,
        until=until,
    )
    events, next_before = page_of_events(db, filters, before_seq=before, limit=PAGE_SIZE)
    query = {name: value for name, value in filters.as_dict().items() if value is not None}
    context = {
        "filters": filters,
        "rows": [{"event": event, "changes": json.loads(event.changes)} for event in events],
        "matching": count_matching(db, filters),
        "choices": distinct_values(db),
        "people": list(db.scalars(select(User).order_by(User.display_name))),
        "query": urlencode(query),
        "next_query": urlencode({**query, "before": next_before}) if next_before else "",
    }
    return render(request, "exports/audit_log.html", principal, context)


def _bundle_page_context(session: Session, collection_id: int, principal: Principal) -> dict[str, Any]:
    sees_all = principal.can(Permission.MANAGE_USERS)
    jobs = recent_bundle_jobs(session, collection_id, viewer_id=principal.user.id, sees_all=sees_all)
    return {
        "collection": get_collection(session, collection_id),
        "sheet_count": session.scalar(select(func.count(Sheet.id)).where(Sheet.collection_id == collection_id)),
        "sync_max": SYNC_MAX_SHEETS,
        "keep_days": BUNDLE_KEEP.days,
        "jobs": [bundle_view(session, job) for job in jobs],
        "form": {"sheet_ids": "", "step": "", "period_hours": "24", "image_side": "4000"},
        "message": "",
    }


@router.get("/collections/{collection_id}/bundle", response_class=HTMLResponse)
def bundle_page(request: Request, collection_id: int, principal: Exporter, db: SessionDep) -> Response:
    """Export a collection (or some of its sheets) as one ZIP, built by a background job with a progress bar."""
    return render(request, "exports/bundle.html", principal, _bundle_page_context(db, collection_id, principal))


def _bundle_request(sheet_ids: str, step: str, period_hours: str, image_side: str) -> BundleCreate:
    """The form's text fields as the API's request body (422 with a readable message when one is wrong)."""
    try:
        return BundleCreate(
            sheet_ids=parse_sheet_ids(sheet_ids),
            step=float(step) if step.strip() else None,
            period_hours=float(period_hours),
            image_side=int(image_side),
        )
    except (ValidationError, ValueError) as error:
        message = "check the options: the step and the period must be positive numbers, the picture size 200-8000 px"
        raise AppError.with_status(422, message, code="invalid") from error


def _start_from_form(state: AppState, collection_id: int, principal: Principal, fields: dict[str, str]) -> int:
    body = _bundle_request(**fields)
    return start_bundle_job(state, collection_id, body.sheet_ids, body.options(), actor=principal.actor).id


def _refused_form(
    request: Request, collection_id: int, principal: Principal, fields: dict[str, str], error: AppError
) -> Response:
    with transaction(app_state(request).reader) as session:
        context = _bundle_page_context(session, collection_id, principal)
    context |= {"form": fields, "message": error.message}
    return render(request, "exports/bundle.html", principal, context, status_code=error.status_code)


@router.post("/collections/{collection_id}/bundle", response_class=HTMLResponse)
async def bundle_start_form(
    request: Request,
    collection_id: int,
    principal: Exporter,
    sheet_ids: Annotated[str, Form(max_length=20_000)] = "",
    step: Annotated[str, Form(max_length=40)] = "",
    period_hours: Annotated[str, Form(max_length=40)] = "24",
    image_side: Annotated[str, Form(max_length=40)] = "4000",
) -> Response:
    """Queue the bundle job (no request transaction: the job is committed before any worker may look for it)."""
    fields = {"sheet_ids": sheet_ids, "step": step, "period_hours": period_hours, "image_side": image_side}
    state = app_state(request)
    try:
        job_id = await run_in_threadpool(_start_from_form, state, collection_id, principal, fields)
    except AppError as error:
        if error.status_code == 404:
            raise
        return await run_in_threadpool(_refused_form, request, collection_id, principal, fields, error)
    return RedirectResponse(f"/bundles/{job_id}", status_code=303)


@router.get("/bundles/{job_id}", response_class=HTMLResponse)
def bundle_job_page(request: Request, job_id: int, principal: Exporter, db: SessionDep) -> Response:
    """One bundle job: its progress bar while it runs, then the download link (or why it failed)."""
    job = visible_bundle_job(db, job_id, viewer_id=principal.user.id, sees_all=principal.can(Permission.MANAGE_USERS))
    view = bundle_view(db, job) | {"keep_days": BUNDLE_KEEP.days}
    return render(request, "exports/bundle_job.html", principal, view)
