"""JSON-side routes of the exports under /api/v1: CSV files (RFC 4180, UTF-8, units in the header row), the
collection bundle (ZIP: at once for small selections, else as a background job), the audit trail as CSV, and the
overlay picture of a sheet. Every download except the picture (a view, like the tiles) is recorded in the audit
trail as an "export" event; a bundle job also records one when its file is made."""

from __future__ import annotations

import io
import os
import tempfile
from datetime import date
from functools import partial
from pathlib import Path
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Query, Request, Response
from fastapi.responses import FileResponse, StreamingResponse
from starlette.background import BackgroundTask
from starlette.concurrency import run_in_threadpool

from tracedesk.accounts.permissions import Permission
from tracedesk.archive.service import get_collection, get_sheet
from tracedesk.digitizing.fits import get_fit
from tracedesk.digitizing.traces import get_trace
from tracedesk.errors import Unprocessable
from tracedesk.exports.audit_log import AUDIT_HEADER, AuditFilters, audit_rows
from tracedesk.exports.bundle import BundleOptions, build_bundle
from tracedesk.exports.bundle_jobs import (
    SYNC_MAX_SHEETS,
    BundleGone,
    bundle_filename,
    start_bundle_job,
    stored_bundle,
)
from tracedesk.exports.csv_cells import write_csv, write_csv_rows
from tracedesk.exports.fit_table import fit_rows, fit_table
from tracedesk.exports.overlay import render_sheet_overlay
from tracedesk.exports.periods import periods_table
from tracedesk.exports.recording import content_sha256, file_sha256, record_export
from tracedesk.exports.schemas import BundleCreate
from tracedesk.exports.selection import collection_sheets, parse_sheet_ids
from tracedesk.exports.vertices import vertices_table
from tracedesk.jobs.schemas import JobRead
from tracedesk.jobs.service import job_read
from tracedesk.storage import StoredFileMissing
from tracedesk.storage.hashing import CHUNK_BYTES
from tracedesk.web.deps import Principal, SessionDep, requires
from tracedesk.web.state import app_state

router = APIRouter(prefix="/api/v1", tags=["exports"])
Reader = Annotated[Principal, Depends(requires(Permission.READ))]
Exporter = Annotated[Principal, Depends(requires(Permission.EXPORT))]
Auditor = Annotated[Principal, Depends(requires(Permission.VERIFY_AUDIT))]
CSV_TYPE = "text/csv; charset=utf-8"
CSV_RESPONSE: dict[int | str, dict[str, Any]] = {200: {"content": {"text/csv": {}}}}
PERIODS = {"hour": 1.0, "day": 24.0, "week": 168.0}
AUDIT_FILENAME = "audit-trail.csv"


def _csv_download(
    request: Request, principal: Principal, data: str, *, filename: str, entity_type: str, entity_id: object, kind: str
) -> Response:
    body = data.encode("utf-8")
    details = {"format": kind, "file": filename, "bytes": len(body), "sha256": content_sha256(body)}
    record_export(app_state(request), principal.actor, entity_type=entity_type, entity_id=entity_id, details=details)
    return Response(body, media_type=CSV_TYPE, headers={"Content-Disposition": f'attachment; filename="{filename}"'})


@router.get("/traces/{trace_id}/vertices.csv", response_class=Response, responses=CSV_RESPONSE)
def trace_vertices(trace_id: int, principal: Exporter, request: Request, db: SessionDep) -> Response:
    """Raw vertices of a trace: pixel coordinates (top-left origin) and chart coordinates with uncertainty."""
    trace = get_trace(db, trace_id)
    header, rows = vertices_table(db, trace)
    filename = f"trace-{trace.id}-v{trace.version}-vertices.csv"
    text = write_csv(header, rows)
    return _csv_download(
        request, principal, text, filename=filename, entity_type="trace", entity_id=trace.id, kind="vertices.csv"
    )


@router.get("/traces/{trace_id}/periods.csv", response_class=Response, responses=CSV_RESPONSE)
def trace_periods(
    trace_id: int,
    principal: Exporter,
    request: Request,
    db: SessionDep,
    period: Annotated[str, Query(description="hour, day, week or a number of hours")] = "day",
    origin: float = 0.0,
    threshold: float | None = None,
) -> Response:
    """Period summaries of a trace on a time axis (mean, extremes and their times, integral, time above/below)."""
    span = PERIODS.get(period)
    if span is None:
        try:
            span = float(period)
        except ValueError as error:
            raise Unprocessable("period must be hour, day, week or a positive number of hours") from error
    trace = get_trace(db, trace_id)
    header, rows = periods_table(db, trace, period_hours=span, origin=origin, threshold=threshold)
    filename = f"trace-{trace.id}-v{trace.version}-periods.csv"
    text = write_csv(header, rows)
    return _csv_download(
        request, principal, text, filename=filename, entity_type="trace", entity_id=trace.id, kind="periods.csv"
    )


@router.get("/fits/{fit_id}/equation.csv", response_class=Response, responses=CSV_RESPONSE)
def fit_equation(fit_id: int, principal: Exporter, request: Request, db: SessionDep) -> Response:
    """One fit as one row: family, coefficients with standard errors, domain, statistics, equation, approval."""
    fit = get_fit(db, fit_id)
    trace = get_trace(db, fit.trace_id)
    header, rows = fit_table(fit_rows(db, [trace.sheet_id], fit_id=fit.id))
    filename = f"fit-{fit.id}-v{fit.version}.csv"
    text = write_csv(header, rows)
    return _csv_download(
        request, principal, text, filename=filename, entity_type="fit", entity_id=fit.id, kind="fits.csv"
    )


@router.get("/collections/{collection_id}/fits.csv", response_class=Response, responses=CSV_RESPONSE)
def collection_fits(
    collection_id: int,
    principal: Exporter,
    request: Request,
    db: SessionDep,
    sheet_ids: Annotated[str | None, Query(max_length=20_000, description="e.g. 3,5,9-12")] = None,
) -> Response:
    """Every fit of the collection's (or the selected sheets') live traces, one row per fit."""
    sheets = collection_sheets(db, collection_id, parse_sheet_ids(sheet_ids))
    header, rows = fit_table(fit_rows(db, [sheet.id for sheet in sheets]))
    text = write_csv(header, rows)
    return _csv_download(
        request,
        principal,
        text,
        filename=f"collection-{collection_id}-fits.csv",
        entity_type="collection",
        entity_id=collection_id,
        kind="fits.csv",
    )


@router.get(
    "/collections/{collection_id}/bundle.zip",
    response_class=Response,
    responses={200: {"content": {"application/zip": {}}}},
)
def collection_bundle(
    collection_id: int,
    principal: Exporter,
    request: Request,
    db: SessionDep,
    sheet_ids: Annotated[str | None, Query(max_length=20_000, description="e.g. 3,5,9-12")] = None,
    step: Annotated[float | None, Query(gt=0, description="resampling step (x units)")] = None,
    period: Annotated[float, Query(gt=0, description="summary period (hours)")] = 24.0,
    image_side: Annotated[int, Query(ge=200, le=8000, description="longer side of each PNG (px)")] = 4000,
) -> Response:
    """One ZIP with, per sheet, raw vertices, resampled series and period summaries of every trace and a PNG of
    the traces and fitted curves over the scan, plus fits.csv and provenance.json, built while you wait into a
    temporary file (streamed, never held in memory). At most 5 sheets (``SYNC_MAX_SHEETS``): larger selections
    get 422 and are made by a background job instead (``POST /api/v1/collections/{id}/bundles``)."""
    state = app_state(request)
    collection = get_collection(db, collection_id)
    sheets = collection_sheets(db, collection_id, parse_sheet_ids(sheet_ids))
    if len(sheets) > SYNC_MAX_SHEETS:
        raise Unprocessable(
            f"{len(sheets)} sheets take too long to bundle while you wait (at most {SYNC_MAX_SHEETS}): start a "
            f"background bundle with POST /api/v1/collections/{collection_id}/bundles"
        )
    options = BundleOptions(step=step, period_hours=period, max_image_side=image_side)
    result = build_bundle(
        db,
        state.store,
        collection,
        sheets,
        generated_by=principal.user.display_name,
        options=options,
        folder=state.settings.data_dir / "incoming",
    )
    filename = bundle_filename(collection_id)
    try:
        details = {
            "format": "bundle.zip",
            "file": filename,
            "bytes": result.size,
            "sha256": result.sha256,
            "sheets": result.sheet_ids,
            "options": {"step": step, "period_hours": period, "image_side": image_side},
        }
        record_export(state, principal.actor, entity_type="collection", entity_id=collection_id, details=details)
    except BaseException:
        result.path.unlink(missing_ok=True)
        raise
    return FileResponse(
        result.path,
        media_type="application/zip",
        filename=filename,
        background=BackgroundTask(os.remove, result.path),
    )


@router.post(
    "/collections/{collection_id}/bundles",
    response_model=JobRead,
    status_code=202,
    responses={202: {"description": "queued; progress at /api/v1/jobs/{id}, the ZIP at the result's download"}},
)
async def start_collection_bundle(
    collection_id: int, body: BundleCreate, principal: Exporter, request: Request, response: Response
) -> JobRead:
    """The bundle of the collection (or of ``sheet_ids``, up to 2000) as a background job: 202 with the job,
    whose progress is at /api/v1/jobs/{id}; once it has succeeded its result names the stored ZIP, downloaded from
    /api/v1/bundles/{id}/bundle.zip by whoever started it (and admins) for 14 days."""
    state = app_state(request)
    options = body.options()
    job = await run_in_threadpool(
        start_bundle_job, state, collection_id, body.sheet_ids, options, actor=principal.actor
    )
    response.headers["Location"] = f"/api/v1/jobs/{job.id}"
    return job_read(job)


@router.get(
    "/bundles/{job_id}/bundle.zip",
    response_class=Response,
    responses={200: {"content": {"application/zip": {}}}},
)
def download_bundle(job_id: int, principal: Exporter, request: Request, db: SessionDep) -> Response:
    """The ZIP a bundle job stored, checked against its SHA-256 before the first byte goes out: 409 while the job
    runs or after it failed, 410 once the bundle is no longer kept. Each download is recorded as an export."""
    state = app_state(request)
    bundle = stored_bundle(db, job_id, viewer_id=principal.user.id, sees_all=principal.can(Permission.MANAGE_USERS))
    try:
        stream = state.store.open_verified(bundle.key)
    except StoredFileMissing as error:
        raise BundleGone("the stored bundle has been removed: build it again") from error
    try:
        details = {"format": "bundle.zip", "stage": "downloaded", "job": job_id, "file": bundle.filename}
        details |= {"bytes": bundle.size, "sha256": bundle.key}
        record_export(state, principal.actor, entity_type="collection", entity_id=bundle.collection_id, details=details)
    except BaseException:
        stream.close()
        raise
    headers = {
        "Content-Disposition": f'attachment; filename="{bundle.filename}"',
        "Content-Length": str(bundle.size),
        "X-Content-SHA256": bundle.key,
    }
    return StreamingResponse(
        iter(partial(stream.read, CHUNK_BYTES), b""),
        media_type="application/zip",
        headers=headers,
        background=BackgroundTask(stream.close),
    )


@router.get("/audit/export.csv", response_class=Response, responses=CSV_RESPONSE)
def audit_export(
    principal: Auditor,
    request: Request,
    db: SessionDep,
    entity_type: str | None = None,
    entity_id: str | None = None,
    actor_id: int | None = None,
    action: str | None = None,
    since: date | None = None,
    until: date | None = None,
) -> Response:
    """The audit trail (filtered) as CSV, oldest first, with each event's hash; the export is itself audited."""
    filters = AuditFilters(entity_type or None, entity_id or None, actor_id, action or None, since, until)
    handle, name = tempfile.mkstemp(prefix="tracedesk-audit-", suffix=".csv")
    path = Path(name)
    try:
        with os.fdopen(handle, "w", encoding="utf-8", newline="") as stream:
            count = write_csv_rows(stream, AUDIT_HEADER, audit_rows(db, filters))
        details = {"format": "audit.csv", "file": AUDIT_FILENAME, "rows": count, "bytes": path.stat().st_size}
        details |= {"sha256": file_sha256(path), "filters": filters.as_dict()}
        record_export(
            app_state(request), principal.actor, entity_type="audit_trail", entity_id="export", details=details
        )
    except BaseException:
        path.unlink(missing_ok=True)
        raise
    return FileResponse(path, media_type=CSV_TYPE, filename=AUDIT_FILENAME, background=BackgroundTask(os.remove, path))


@router.get("/sheets/{sheet_id}/overlay.png", response_class=Response, responses={200: {"content": {"image/png": {}}}})
def sheet_overlay(
    sheet_id: int,
    _: Reader,
    request: Request,
    db: SessionDep,
    max_side: Annotated[int, Query(ge=100, le=8000)] = 1600,
) -> Response:
    """The scan with every trace and fitted curve drawn over it (for a visual check; not an audited export)."""
    sheet = get_sheet(db, sheet_id).sheet
    picture = render_sheet_overlay(db, app_state(request).store, sheet, max_side=max_side)
    buffer = io.BytesIO()
    picture.save(buffer, format="PNG")
    return Response(buffer.getvalue(), media_type="image/png", headers={"Cache-Control": "no-store"})
