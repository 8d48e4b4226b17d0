"""Batch runs: register every sheet from its printed grid, trace each expected pen, fit, score, and decide.

Each sheet is processed without locks and then written in one transaction of its own (calibration, traces, fits
and the sheet's verdict together), so a run stopped half-way keeps what it finished and resumes with the rest.
Every automatic result says so in the audit trail ("batch run N"). Sheets whose figures pass the thresholds are
marked ready for review; the others wait for a person, with the reason shown.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from tracedesk.archive.service import get_collection, get_sheet
from tracedesk.audit.service import Actor, record_event
from tracedesk.db import transaction
from tracedesk.digitizing import calibrations, fits, traces
from tracedesk.digitizing.batch_schemas import BatchItemRead, BatchRunCreate, BatchRunRead, BatchThresholds
from tracedesk.digitizing.chart_specs import get_chart_spec
from tracedesk.digitizing.detection import detect_calibration
from tracedesk.digitizing.schemas import AutoRegion, AutoTraceRequest
from tracedesk.digitizing.service import mark_work_started
from tracedesk.digitizing.sheet_image import load_sheet_image
from tracedesk.errors import NotFound, Unprocessable
from tracedesk.jobs.context import JobContext
from tracedesk.jobs.registry import job_handler
from tracedesk.jobs.service import submit_job
from tracedesk.models import BatchRun, BatchRunItem, Sheet
from tracedesk.models.base import utcnow
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.trace_regions import BoxRegion
from tracedesk.science.tracing import TraceResult
from tracedesk.web.state import AppState

SKIPPED_STATUSES = ("approved", "withdrawn")


def start_batch_run(state: AppState, collection_id: int, body: BatchRunCreate, *, actor: Actor) -> BatchRun:
    """Record the run and one pending item per sheet, then queue the job that works through them."""
    with transaction(state.writer) as session:
        get_collection(session, collection_id)
        spec = get_chart_spec(session, body.chart_spec_id)
        if spec.kind != "cartesian" or not spec.geometry:
            raise Unprocessable("batch runs need a cartesian chart spec with its printed geometry")
        query = select(Sheet.id).where(Sheet.collection_id == collection_id, Sheet.status.not_in(SKIPPED_STATUSES))
        if body.sheet_ids is not None:
            query = query.where(Sheet.id.in_(body.sheet_ids))
        sheet_ids = list(session.scalars(query.order_by(Sheet.id)))
        if not sheet_ids:
            raise Unprocessable("no sheets to process in that collection or selection")
        run = BatchRun(
            collection_id=collection_id, chart_spec_id=spec.id, created_by_id=actor.id, settings=body.model_dump_json()
        )
        session.add(run)
        session.flush()
        session.add_all(BatchRunItem(run_id=run.id, sheet_id=sheet_id) for sheet_id in sheet_ids)
        record_event(
            session,
            actor=actor,
            action="start_batch",
            entity_type="batch_run",
            entity_id=run.id,
            changes={"sheets": {"old": None, "new": len(sheet_ids)}, "chart_spec": {"old": None, "new": spec.id}},
        )
    job = submit_job(state, "batch_run", {"run_id": run.id}, actor=actor)
    with transaction(state.writer) as session:
        stored = session.get(BatchRun, run.id)
        assert stored is not None
        stored.job_id = job.id
    return run


@dataclass
class SheetOutcome:
    status: str
    score: dict[str, Any]
    reason: str
    detection: dict[str, Any] | None
    traces: list[tuple[AutoTraceRequest, TraceResult]]


def _region(detection: dict[str, Any]) -> AutoRegion:
    pixels = np.asarray([point["pixel"] for point in detection["control_points"]], dtype=np.float64)
    return AutoRegion(
        box=[float(pixels[:, 0].min()), float(pixels[:, 1].min()), float(pixels[:, 0].max()), float(pixels[:, 1].max())]
    )


def _verdict(score: dict[str, Any], thresholds: BatchThresholds) -> str:
    """Empty when every figure passes; otherwise the first reason a person must look."""
    if score["confidence"] < thresholds.min_confidence:
        return f"registration confidence {score['confidence']:.2f} is below {thresholds.min_confidence}"
    if score["registration_rms_px"] > thresholds.max_registration_rms_px:
        return f"registration RMS {score['registration_rms_px']:.2f} px exceeds {thresholds.max_registration_rms_px}"
    for pen in score["pens"]:
        if "error" in pen:
            return f"pen {pen['name']}: {pen['error']}"
        if pen["coverage"] < thresholds.min_coverage:
            return f"pen {pen['name']}: coverage {pen['coverage']:.2f} is below {thresholds.min_coverage}"
        if pen["gaps"] > thresholds.max_gaps:
            return f"pen {pen['name']}: {pen['gaps']} gaps (more than {thresholds.max_gaps})"
    return ""


def analyse_sheet(image: np.ndarray, geometry: dict[str, Any], body: BatchRunCreate) -> SheetOutcome:
    """Register and trace one sheet (no database): the outcome to store."""
    try:
        detection = detect_calibration(image, geometry)
    except ScienceInputError as error:
        return SheetOutcome("needs_person", {}, f"registration refused: {error}", None, [])
    region = _region(detection)
    assert region.box is not None
    box = BoxRegion(*region.box)
    score: dict[str, Any] = {
        "confidence": detection["confidence"],
        "orientation": detection["orientation"],
        "registration_rms_px": detection["residuals"]["rms_px"] or 0.0,
        "pens": [],
    }
    found = []
    for pen in body.pens:
        request = AutoTraceRequest(
            name=pen.name, unit=pen.unit, pen_color=pen.pen_color, region=region, tolerance=pen.tolerance
        )
        try:
            result = traces.run_auto_trace(image, box, request)
        except ScienceInputError as error:
            score["pens"].append({"name": pen.name, "error": str(error)})
            continue
        score["pens"].append(
            {
                "name": pen.name,
                "coverage": result.coverage,
                "gaps": len(result.gap_spans),
                "median_confidence": float(np.median(result.confidence)) if len(result.confidence) else 0,
            }
        )
        found.append((request, result))
    reason = _verdict(score, body.thresholds)
    return SheetOutcome("needs_person" if reason else "ready_for_review", score, reason, detection, found)


def _store_outcome(
    session: Session, run: BatchRun, item: BatchRunItem, outcome: SheetOutcome, body: BatchRunCreate, actor: Actor
) -> None:
    cause = f"batch run {run.id}, automatic"
    sheet = get_sheet(session, item.sheet_id).sheet
    if outcome.detection is not None and calibrations.calibration_of(session, sheet.id) is not None:
        outcome.status, outcome.reason = "needs_person", "the sheet already has a calibration; it was not replaced"
    elif outcome.detection is not None:
        calibrations.put_calibration(
            session,
            sheet,
            outcome.detection["calibration"],
            actor=actor,
            reason=f"{cause} (confidence {outcome.detection['confidence']:.2f})",
            origin="automatic",
        )
        for request, result in outcome.traces:
            trace = traces.store_auto_trace(session, sheet, request, result, actor=actor, reason=cause)
            if body.fit is not None:
                _fit(session, trace, body, outcome, actor, cause)
        mark_work_started(session, sheet, actor=actor)
    item.status, item.reason, item.finished_at = outcome.status, outcome.reason, utcnow()
    item.score = json.dumps(outcome.score)
    record_event(
        session,
        actor=actor,
        action="batch_verdict",
        entity_type="sheet",
        entity_id=sheet.id,
        changes={"verdict": {"old": None, "new": outcome.status}},
        reason=outcome.reason or cause,
    )


def _fit(session: Session, trace: Any, body: BatchRunCreate, outcome: SheetOutcome, actor: Actor, cause: str) -> None:
    options = {key: value for key, value in (body.fit or {}).items() if key != "family"}
    session.flush()
    try:
        fit = fits.create_fit(session, trace, str((body.fit or {}).get("family")), options, actor=actor, reason=cause)
    except (ScienceInputError, Unprocessable) as error:
        outcome.status, outcome.reason = "needs_person", f"fit of {trace.name} failed: {error}"
        return
    r_squared = json.loads(fit.result)["stats"].get("r_squared")
    outcome.score.setdefault("fits", []).append({"trace": trace.name, "r_squared": r_squared})
    floor = body.thresholds.min_r_squared
    if floor is not None and (r_squared is None or r_squared < floor) and outcome.status == "ready_for_review":
        outcome.status, outcome.reason = "needs_person", f"fit of {trace.name}: R² {r_squared} is below {floor}"


@job_handler("batch_run")
def batch_run_job(context: JobContext) -> dict[str, Any]:
    """Work through the run's pending sheets (resumable: finished ones are skipped)."""
    state, run_id = context.state, int(context.params["run_id"])
    with transaction(state.writer) as session:
        run = session.get(BatchRun, run_id)
        if run is None:
            raise NotFound(f"no batch run with id {run_id}")
        run.status = "running"
        body = BatchRunCreate.model_validate_json(run.settings)
        geometry = json.loads(get_chart_spec(session, run.chart_spec_id).geometry or "{}")
        pending = [
            (item.id, item.sheet_id)
            for item in session.scalars(
                select(BatchRunItem)
                .where(BatchRunItem.run_id == run_id, BatchRunItem.status == "pending")
                .order_by(BatchRunItem.id)
            )
        ]
    for done, (item_id, sheet_id) in enumerate(pending):
        context.progress(done / max(len(pending), 1), f"sheet {done + 1} of {len(pending)}")
        with transaction(state.reader) as session:
            derived_key = get_sheet(session, sheet_id).sheet.derived_key
        outcome = analyse_sheet(load_sheet_image(state.store, derived_key), geometry, body)
        with transaction(state.writer) as session:
            run = session.get(BatchRun, run_id)
            item = session.get(BatchRunItem, item_id)
            assert run is not None and item is not None
            _store_outcome(session, run, item, outcome, body, context.actor)

    def finish(session: Session) -> dict[str, Any]:
        run = session.get(BatchRun, run_id)
        assert run is not None
        run.status, run.finished_at = "finished", utcnow()
        return {"run_id": run_id, "counts": item_counts(session, run_id)}

    return context.finish(finish)


def item_counts(session: Session, run_id: int) -> dict[str, int]:
    rows = session.execute(
        select(BatchRunItem.status, func.count()).where(BatchRunItem.run_id == run_id).group_by(BatchRunItem.status)
    )
    counts = {"pending": 0, "ready_for_review": 0, "needs_person": 0}
    counts.update({status: int(count) for status, count in rows})
    return counts


def batch_run_read(session: Session, run_id: int) -> BatchRunRead:
    run = session.get(BatchRun, run_id)
    if run is None:
        raise NotFound(f"no batch run with id {run_id}")
    items = session.scalars(select(BatchRunItem).where(BatchRunItem.run_id == run_id).order_by(BatchRunItem.id))
    return BatchRunRead(
        id=run.id,
        collection_id=run.collection_id,
        chart_spec_id=run.chart_spec_id,
        status=run.status,
        job_id=run.job_id,
        counts=item_counts(session, run_id),
        settings=json.loads(run.settings),
        items=[
            BatchItemRead(
                sheet_id=i.sheet_id,
                status=i.status,
                score=json.loads(i.score),
                reason=i.reason,
                finished_at=i.finished_at,
            )
            for i in items
        ],
        created_at=run.created_at,
        finished_at=run.finished_at,
    )
