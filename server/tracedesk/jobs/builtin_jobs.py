"""Job handlers of the digitizing engine: automatic tracing of large sheets, re-derivation of a sheet's fits."""

from __future__ import annotations

import time
from typing import Any

from sqlalchemy.orm import Session

from tracedesk.archive.service import get_sheet
from tracedesk.audit.service import record_event
from tracedesk.db import transaction
from tracedesk.digitizing import traces
from tracedesk.digitizing.schemas import AutoTraceRequest
from tracedesk.digitizing.service import mark_work_started, rederive_sheet
from tracedesk.digitizing.sheet_image import load_sheet_image
from tracedesk.jobs.context import JobContext
from tracedesk.jobs.registry import job_handler


@job_handler("auto_trace")
def auto_trace_job(context: JobContext) -> dict[str, Any]:
    """params: {"sheet_id", "request": AutoTraceRequest as JSON}; result: {"trace_id"}."""
    sheet_id = int(context.params["sheet_id"])
    body = AutoTraceRequest.model_validate(context.params["request"])
    with transaction(context.state.reader) as session:
        sheet = get_sheet(session, sheet_id).sheet
        region = traces.region_for(body.region, session, sheet)
        derived_key = sheet.derived_key
    context.progress(0.02, "loading the sheet image")
    image = load_sheet_image(context.state.store, derived_key)
    result = traces.run_auto_trace(image, region, body, progress=lambda f: context.progress(0.05 + 0.9 * f, "tracing"))

    def write(session: Session) -> dict[str, Any]:
        sheet = get_sheet(session, sheet_id).sheet
        trace = traces.store_auto_trace(session, sheet, body, result, actor=context.actor)
        mark_work_started(session, sheet, actor=context.actor)
        session.flush()
        return {"trace_id": trace.id, "vertices": len(result.vertices), "coverage": result.coverage}

    return context.finish(write)


@job_handler("rederive_sheet")
def rederive_sheet_job(context: JobContext) -> dict[str, Any]:
    """params: {"sheet_id", "cause"}; refits every fit of the sheet's traces in one transaction."""
    sheet_id = int(context.params["sheet_id"])

    def write(session: Session) -> dict[str, Any]:
        sheet = get_sheet(session, sheet_id).sheet
        return {"fits": rederive_sheet(session, sheet, actor=context.actor, cause=str(context.params["cause"]))}

    return context.finish(write)


@job_handler("probe")
def probe_job(context: JobContext) -> dict[str, Any]:
    """A worker self-test: waits ``seconds`` (heartbeating), then records one audit event. Used by operators
    to check that queue workers run jobs, and by the tests that kill a worker in the middle of a job."""
    seconds = min(max(float(context.params.get("seconds", 0.0)), 0.0), 600.0)
    deadline = time.monotonic() + seconds
    while (left := deadline - time.monotonic()) > 0:
        time.sleep(min(left, 0.2))
        context.progress(1.0 - left / seconds if seconds else 1.0, "waiting")

    def write(session: Session) -> dict[str, Any]:
        record_event(
            session,
            actor=context.actor,
            action="probe",
            entity_type="job",
            entity_id=context.job_id,
            changes={"attempt": {"old": None, "new": context.attempt}},
        )
        return {"attempt": context.attempt}

    return context.finish(write)
