"""JSON routes of the digitizing engine under /api/v1: calibration, traces, fits, resampled data, summaries."""

from __future__ import annotations

import hashlib
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Body, Depends, Query, Request, Response
from fastapi.responses import JSONResponse, PlainTextResponse
from sqlalchemy.orm import Session
from starlette.concurrency import run_in_threadpool

from tracedesk.accounts.permissions import Permission
from tracedesk.archive.service import MAX_PAGE, get_collection, get_sheet
from tracedesk.db import transaction
from tracedesk.digitizing import batch, calibrations, chart_specs, fits, series, traces
from tracedesk.digitizing.batch_schemas import BatchRunCreate, BatchRunPage, BatchRunRead, BatchRunStatus
from tracedesk.digitizing.detection import detect_calibration
from tracedesk.digitizing.schemas import (
    AutoTraceRequest,
    CalibrationIn,
    CalibrationRead,
    ChartSpecCreate,
    ChartSpecRead,
    ChartSpecUpdate,
    DetectRequest,
    FitRead,
    FitRequest,
    TraceCreate,
    TraceRead,
    TraceUpdate,
)
from tracedesk.digitizing.service import mark_work_started, rederive_sheet, require_reason_when_locked
from tracedesk.digitizing.sheet_image import load_sheet_image
from tracedesk.errors import Unprocessable
from tracedesk.exports.recording import record_export
from tracedesk.jobs.schemas import JobRead
from tracedesk.jobs.service import job_read, submit_job
from tracedesk.models import Sheet, Trace
from tracedesk.web.conditional import require_if_match, set_etag
from tracedesk.web.deps import Principal, SessionDep, requires, write_then_read
from tracedesk.web.state import app_state

router = APIRouter(prefix="/api/v1", tags=["digitizing"])
Reader = Annotated[Principal, Depends(requires(Permission.READ))]
Digitizer = Annotated[Principal, Depends(requires(Permission.DIGITIZE))]
Manager = Annotated[Principal, Depends(requires(Permission.MANAGE_COLLECTIONS))]
PERIODS = {"hour": 1.0, "day": 24.0, "week": 168.0}


def _sheet(db: SessionDep, sheet_id: int) -> Sheet:
    return get_sheet(db, sheet_id).sheet


@router.put("/sheets/{sheet_id}/calibration", response_model=CalibrationRead, responses={201: {}, 412: {}, 428: {}})
def put_calibration(
    sheet_id: int, body: CalibrationIn, principal: Digitizer, request: Request, db: SessionDep
) -> Response:
    """Calibrate a sheet. Replacing an existing calibration needs If-Match and re-derives every fit."""
    sheet = _sheet(db, sheet_id)
    existing = calibrations.calibration_of(db, sheet_id)
    if existing is not None:
        require_if_match(request, "calibration", sheet_id, existing.version)
    require_reason_when_locked(sheet, body.reason)
    spec = body.model_dump(exclude={"reason"}, exclude_none=True)
    row, replaced = calibrations.put_calibration(db, sheet, spec, actor=principal.actor, reason=body.reason)
    mark_work_started(db, sheet, actor=principal.actor)
    if replaced:
        rederive_sheet(db, sheet, actor=principal.actor, cause=f"calibration changed to version {row.version}")
    body_out = calibrations.calibration_read(row).model_dump(mode="json")
    response = JSONResponse(body_out, status_code=200 if replaced else 201)
    set_etag(response, "calibration", sheet_id, row.version)
    return response


def _detect(request: Request, sheet_id: int, body: DetectRequest, principal: Principal) -> dict[str, Any]:
    """Detect without holding any lock; store (as an automatic calibration) only when asked and confident."""
    state = app_state(request)
    with transaction(state.reader) as session:
        sheet = _sheet(session, sheet_id)
        derived_key = sheet.derived_key
        spec = chart_specs.spec_for_detection(session, body)
    result = detect_calibration(load_sheet_image(state.store, derived_key), spec)
    result["stored"] = False
    if not body.accept or "calibration" not in result:  # circular charts without time zero have none
        return result
    if result["confidence"] < body.min_confidence:
        result["warnings"] = [*result["warnings"], f"not stored: confidence below {body.min_confidence}"]
        return result
    with transaction(state.writer) as session:
        sheet = _sheet(session, sheet_id)
        existing = calibrations.calibration_of(session, sheet_id)
        if existing is not None:
            require_if_match(request, "calibration", sheet_id, existing.version)
        reason = f"automatic registration from the printed grid (confidence {result['confidence']:.2f})"
        row, _ = calibrations.put_calibration(
            session, sheet, result["calibration"], actor=principal.actor, reason=reason, origin="automatic"
        )
        mark_work_started(session, sheet, actor=principal.actor)
        result["stored"] = True
        result["stored_calibration"] = calibrations.calibration_read(row).model_dump(mode="json")
    return result


@router.post("/sheets/{sheet_id}/calibration/detect", responses={412: {}, 428: {}})
async def detect_calibration_route(
    sheet_id: int, body: DetectRequest, principal: Digitizer, request: Request
) -> dict[str, Any]:
    """Find the printed grid of a chart spec on the sheet and propose a calibration (control points at grid
    intersections, residuals, confidence). It is stored only with ``"accept": true`` (If-Match when one exists);
    a sheet that is not the spec's chart, blank or mirrored is refused with the reason."""
    return await run_in_threadpool(_detect, request, sheet_id, body, principal)


@router.get("/sheets/{sheet_id}/calibration", response_model=CalibrationRead)
def get_calibration(sheet_id: int, _: Reader, db: SessionDep, response: Response) -> CalibrationRead:
    _sheet(db, sheet_id)
    row = calibrations.require_calibration(db, sheet_id)
    set_etag(response, "calibration", sheet_id, row.version)
    return calibrations.calibration_read(row)


@router.post("/sheets/{sheet_id}/traces", response_model=TraceRead, status_code=201)
def create_trace(
    sheet_id: int, body: TraceCreate, principal: Digitizer, db: SessionDep, response: Response
) -> TraceRead:
    sheet = _sheet(db, sheet_id)
    trace = traces.create_manual_trace(db, sheet, body, actor=principal.actor)
    mark_work_started(db, sheet, actor=principal.actor)
    set_etag(response, "trace", trace.id, trace.version)
    return traces.trace_read(db, trace)


def _auto_trace(request: Request, sheet_id: int, body: AutoTraceRequest, principal: Principal) -> TraceRead:
    """Read what is needed, trace without holding any lock, then store the result in one short transaction."""
    state = app_state(request)
    with transaction(state.reader) as session:
        sheet = _sheet(session, sheet_id)
        region = traces.region_for(body.region, session, sheet)
        derived_key = sheet.derived_key
    image = load_sheet_image(state.store, derived_key)
    result = traces.run_auto_trace(image, region, body)
    with transaction(state.writer) as session:
        sheet = _sheet(session, sheet_id)
        trace = traces.store_auto_trace(session, sheet, body, result, actor=principal.actor)
        mark_work_started(session, sheet, actor=principal.actor)
        session.flush()
        return traces.trace_read(session, trace)


@router.post(
    "/sheets/{sheet_id}/traces/auto",
    response_model=TraceRead,
    status_code=201,
    responses={202: {"model": JobRead, "description": "queued as a background job (background=true)"}},
)
async def auto_trace(
    sheet_id: int, body: AutoTraceRequest, principal: Digitizer, request: Request, background: bool = False
) -> Response:
    """Find a pen line of the given colour in a box, polygon or the calibrated area; stored as a new trace.

    With ``background=true`` the work runs as a job: 202 with the job, whose progress is at /api/v1/jobs/{id}
    and whose result names the new trace.
    """
    if background:
        job = await run_in_threadpool(_queue_auto_trace, request, sheet_id, body, principal)
        return JSONResponse(
            job.model_dump(mode="json"), status_code=202, headers={"Location": f"/api/v1/jobs/{job.id}"}
        )
    read = await run_in_threadpool(_auto_trace, request, sheet_id, body, principal)
    response = JSONResponse(read.model_dump(mode="json"), status_code=201)
    set_etag(response, "trace", read.id, read.version)
    return response


def _queue_auto_trace(request: Request, sheet_id: int, body: AutoTraceRequest, principal: Principal) -> JobRead:
    state = app_state(request)
    with transaction(state.reader) as session:
        sheet = _sheet(session, sheet_id)
        traces.region_for(body.region, session, sheet)  # refuse a bad region now, not later in the job
    params = {"sheet_id": sheet_id, "request": body.model_dump(mode="json")}
    return job_read(submit_job(state, "auto_trace", params, actor=principal.actor))


@router.get("/sheets/{sheet_id}/traces", response_model=list[TraceRead])
def list_traces(sheet_id: int, _: Reader, db: SessionDep) -> list[TraceRead]:
    _sheet(db, sheet_id)
    return [traces.trace_read(db, trace) for trace in traces.traces_of_sheet(db, sheet_id)]


@router.get("/traces/{trace_id}", response_model=TraceRead)
def get_trace(trace_id: int, _: Reader, db: SessionDep, response: Response) -> TraceRead:
    trace = traces.get_trace(db, trace_id)
    set_etag(response, "trace", trace.id, trace.version)
    return traces.trace_read(db, trace)


@router.patch("/traces/{trace_id}", response_model=TraceRead)
async def update_trace(
    trace_id: int, body: TraceUpdate, principal: Digitizer, request: Request, response: Response
) -> TraceRead:
    """Save an edit (the workbench's autosave). The change commits first; the answer (with the samples and
    uncertainties in chart units) is computed afterwards, outside the writer lock."""

    def write(db: Session) -> None:
        trace = traces.get_trace(db, trace_id)
        require_if_match(request, "trace", trace.id, trace.version)
        sheet = _sheet(db, trace.sheet_id)
        require_reason_when_locked(sheet, body.reason)
        before = trace.version
        traces.update_trace(db, sheet, trace, body, actor=principal.actor)
        if trace.version != before and body.vertices is not None:
            fits.rederive_fits(db, trace, actor=principal.actor, cause=f"trace changed to version {trace.version}")

    def read(db: Session, _: None) -> TraceRead:
        # Not get_trace: the edit is saved even if someone withdraws the trace in between; answer with it.
        trace = db.get_one(Trace, trace_id)
        set_etag(response, "trace", trace.id, trace.version)
        return traces.trace_read(db, trace)

    return await write_then_read(request, write, read)


@router.delete("/traces/{trace_id}", status_code=204)
def withdraw_trace(
    trace_id: int,
    principal: Digitizer,
    request: Request,
    db: SessionDep,
    reason: Annotated[str, Query(min_length=1, max_length=2000)],
) -> Response:
    """Withdraw a trace (it stays in the archive and the audit trail, with the reason)."""
    trace = traces.get_trace(db, trace_id)
    require_if_match(request, "trace", trace.id, trace.version)
    traces.withdraw_trace(db, trace, actor=principal.actor, reason=reason)
    return Response(status_code=204)


@router.post("/traces/{trace_id}/fits", response_model=FitRead, status_code=201)
def create_fit(trace_id: int, body: FitRequest, principal: Digitizer, db: SessionDep, response: Response) -> FitRead:
    """Fit a model: ``{"family": "polynomial", "degree": 3}``, ``{"family": "fourier", "degree": 2,
    "period": 24}``, ``{"family": "exponential"}``, ``power``, ``logarithmic``, ``spline``, ``interpolation``."""
    trace = traces.get_trace(db, trace_id)
    options: dict[str, Any] = body.model_dump(exclude={"family"})
    fit = fits.create_fit(db, trace, body.family, options, actor=principal.actor)
    set_etag(response, "fit", fit.id, fit.version)
    return fits.fit_read(fit)


@router.post("/traces/{trace_id}/fits/suggest")
def suggest_fit(
    trace_id: int, _: Reader, db: SessionDep, period: Annotated[float | None, Body(embed=True, gt=0)] = None
) -> dict[str, Any]:
    """Fit the candidate models and rank them by AICc and cross-validation (the simpler preferred on ties)."""
    return fits.suggest(db, traces.get_trace(db, trace_id), period=period)


@router.get("/traces/{trace_id}/fits", response_model=list[FitRead])
def list_fits(trace_id: int, _: Reader, db: SessionDep) -> list[FitRead]:
    traces.get_trace(db, trace_id)
    return [fits.fit_read(fit) for fit in fits.fits_of_trace(db, trace_id)]


@router.get("/fits/{fit_id}", response_model=FitRead)
def get_fit(fit_id: int, _: Reader, db: SessionDep, response: Response) -> FitRead:
    fit = fits.get_fit(db, fit_id)
    set_etag(response, "fit", fit.id, fit.version)
    return fits.fit_read(fit)


@router.get(
    "/traces/{trace_id}/resampled.csv", response_class=PlainTextResponse, responses={200: {"content": {"text/csv": {}}}}
)
def resampled_csv(
    trace_id: int,
    principal: Reader,
    request: Request,
    db: SessionDep,
    step: Annotated[float | None, Query(gt=0)] = None,
    count: Annotated[int | None, Query(ge=2, le=1_000_000)] = None,
    start: float | None = None,
    stop: float | None = None,
    method: Literal["linear", "pchip", "fit"] = "linear",
    fit_id: int | None = None,
    max_gap: Annotated[float | None, Query(gt=0)] = None,
) -> Response:
    """The trace on a uniform grid (RFC 4180 CSV, units in the header); gaps and out-of-range rows are empty."""
    if step is None and count is None:
        raise Unprocessable("give step or count")
    trace = traces.get_trace(db, trace_id)
    resampled = series.resample(
        db, trace, step=step, count=count, start=start, stop=stop, method=method, fit_id=fit_id, max_gap=max_gap
    )
    text = series.resampled_csv(db, trace, resampled)
    filename = f"trace-{trace.id}-v{trace.version}-resampled.csv"
    data = text.encode("utf-8")
    details = {
        "format": "resampled.csv",
        "file": filename,
        "bytes": len(data),
        "sha256": hashlib.sha256(data).hexdigest(),
        "method": method,
        "step": step,
        "count": count,
    }
    record_export(app_state(request), principal.actor, entity_type="trace", entity_id=trace.id, details=details)
    return Response(
        data,
        media_type="text/csv; charset=utf-8",
        headers={"Content-Disposition": f'attachment; filename="{filename}"'},
    )


@router.get("/traces/{trace_id}/summary")
def period_summary(
    trace_id: int,
    _: Reader,
    db: SessionDep,
    period: Annotated[str, Query(description="hour, day, week or a number of hours")] = "day",
    origin: float = 0.0,
    threshold: float | None = None,
    max_gap: Annotated[float | None, Query(gt=0)] = None,
) -> dict[str, Any]:
    """Per period: mean, minimum and maximum with their times, integral, time above/below a threshold, count."""
    span = PERIODS.get(period)
    if span is None:
        try:
            span = float(period)
        except ValueError as error:
            raise Unprocessable("period must be hour, day, week or a positive number of hours") from error
    trace = traces.get_trace(db, trace_id)
    rows = series.summaries(db, trace, period_hours=span, origin=origin, threshold=threshold, max_gap=max_gap)
    return {
        "trace_id": trace.id,
        "trace_version": trace.version,
        "period_hours": span,
        "unit": trace.unit,
        "periods": rows,
    }


@router.post("/chart-specs", response_model=ChartSpecRead, status_code=201)
def create_chart_spec(body: ChartSpecCreate, principal: Digitizer, db: SessionDep, response: Response) -> ChartSpecRead:
    """Save a chart's printed geometry (for automatic registration) and/or a calibration template."""
    spec = chart_specs.create_chart_spec(db, body, actor=principal.actor)
    set_etag(response, "chart_spec", spec.id, spec.version)
    return chart_specs.chart_spec_read(spec)


@router.get("/chart-specs", response_model=list[ChartSpecRead])
def list_chart_specs(_: Reader, db: SessionDep, collection_id: int | None = None) -> list[ChartSpecRead]:
    return [chart_specs.chart_spec_read(spec) for spec in chart_specs.list_chart_specs(db, collection_id=collection_id)]


@router.get("/chart-specs/{spec_id}", response_model=ChartSpecRead)
def get_chart_spec(spec_id: int, _: Reader, db: SessionDep, response: Response) -> ChartSpecRead:
    spec = chart_specs.get_chart_spec(db, spec_id)
    set_etag(response, "chart_spec", spec.id, spec.version)
    return chart_specs.chart_spec_read(spec)


@router.patch("/chart-specs/{spec_id}", response_model=ChartSpecRead)
def update_chart_spec(
    spec_id: int, body: ChartSpecUpdate, principal: Digitizer, request: Request, db: SessionDep, response: Response
) -> ChartSpecRead:
    spec = chart_specs.get_chart_spec(db, spec_id)
    require_if_match(request, "chart_spec", spec.id, spec.version)
    chart_specs.update_chart_spec(db, spec, body, actor=principal.actor)
    set_etag(response, "chart_spec", spec.id, spec.version)
    return chart_specs.chart_spec_read(spec)


@router.post("/collections/{collection_id}/batch-runs", response_model=BatchRunRead, status_code=202)
async def start_batch_run(
    collection_id: int, body: BatchRunCreate, principal: Manager, request: Request, response: Response
) -> BatchRunRead:
    """Digitize a collection (or a selection) unattended: register each sheet from the chart spec's printed grid,
    trace each pen, fit, score; sheets passing the thresholds are marked ready for review, the rest wait for a
    person with the reason. Runs as a background job (progress at /api/v1/jobs/{job_id})."""
    state = app_state(request)
    run = await run_in_threadpool(batch.start_batch_run, state, collection_id, body, actor=principal.actor)
    response.headers["Location"] = f"/api/v1/batch-runs/{run.id}"
    with transaction(state.reader) as session:
        return batch.batch_run_read(session, run.id)


@router.get("/collections/{collection_id}/batch-runs", response_model=BatchRunPage)
def list_batch_runs(
    collection_id: int,
    _: Reader,
    db: SessionDep,
    status: BatchRunStatus | None = None,
    limit: Annotated[int, Query(ge=1, le=MAX_PAGE)] = 50,
    cursor: Annotated[str | None, Query(max_length=200)] = None,
) -> BatchRunPage:
    """The collection's runs, newest first, with their counts (each run's sheets are at /api/v1/batch-runs/{id});
    pages of ``limit`` runs, the next one asked for with ``cursor=next_cursor``."""
    get_collection(db, collection_id)
    items, next_cursor = batch.list_batch_runs(db, collection_id, status=status, limit=limit, cursor=cursor)
    return BatchRunPage(items=items, next_cursor=next_cursor)


@router.get("/batch-runs/{run_id}", response_model=BatchRunRead)
def get_batch_run(run_id: int, _: Reader, db: SessionDep) -> BatchRunRead:
    return batch.batch_run_read(db, run_id)


@router.post("/batch-runs/{run_id}/resume", response_model=BatchRunRead, status_code=202, responses={409: {}})
async def resume_batch_run(run_id: int, principal: Manager, request: Request) -> BatchRunRead:
    """Go on with an interrupted run's pending sheets (finished sheets are not done again)."""
    state = app_state(request)
    await run_in_threadpool(batch.resume_batch_run, state, run_id, actor=principal.actor)
    with transaction(state.reader) as session:
        return batch.batch_run_read(session, run_id)
