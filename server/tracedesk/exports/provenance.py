"""The provenance document of a bundle: for each sheet, the scan's SHA-256, the calibration version, origin and
residuals, trace and fit versions, trace origins, who digitized it (people, or batch runs marked automatic), who
approved it and when, and the record hash a signature binds."""

from __future__ import annotations

import json
import math
from datetime import datetime
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk import __version__
from tracedesk.digitizing.calibrations import calibration_of
from tracedesk.digitizing.fits import fits_of_trace
from tracedesk.digitizing.traces import traces_of_sheet
from tracedesk.exports.approvals import SheetApproval
from tracedesk.models import Collection, Sheet, SourceFile, Task, User
from tracedesk.workflow.authorship import batch_authorships, human_authors
from tracedesk.workflow.record import sheet_record

PROVENANCE_FORMAT = "tracedesk.bundle-provenance/1"


def iso_utc(moment: datetime | None) -> str | None:
    return moment.isoformat().replace("+00:00", "Z") if moment is not None else None


def _calibration(session: Session, sheet: Sheet, names: dict[int, str]) -> dict[str, Any] | None:
    row = calibration_of(session, sheet.id)
    if row is None:
        return None
    report = json.loads(row.report)
    return {
        "version": row.version,
        "kind": row.kind,
        "origin": row.origin,
        "transform": report.get("transform"),
        "rms_px": report.get("rms_px"),
        "rms_units": report.get("rms_values"),
        "leave_one_out_rms_px": report.get("loo_rms_px"),
        "residual_distance_px": report.get("residual_distance_px"),
        "warnings": report.get("warnings") or [],
        "updated_at": iso_utc(row.updated_at),
        "updated_by": names.get(row.updated_by_id or 0),
    }


def _task(session: Session, sheet_id: int, names: dict[int, str]) -> dict[str, Any] | None:
    task = session.scalar(select(Task).where(Task.sheet_id == sheet_id))
    if task is None:
        return None
    return {
        "id": task.id,
        "state": task.state,
        "technician": names.get(task.technician_id or 0),
        "second_technician": names.get(task.second_technician_id or 0),
        "reviewer": names.get(task.reviewer_id or 0),
        "double_digitization": task.double_digitization,
    }


def _digitized_by(session: Session, sheet_id: int) -> dict[str, Any]:
    """``digitized_by``: the people who wrote the digitization and the batch runs that wrote it automatically (by
    their audit name); ``batch_runs``: each such run, marked automatic, with who started it."""
    runs = batch_authorships(session, sheet_id)
    names = [*human_authors(session, sheet_id).values(), *(run.actor_name for run in runs)]
    return {
        "digitized_by": sorted(names),
        "batch_runs": [{"batch_run": run.run_id, "automatic": True, "started_by": run.started_by} for run in runs],
    }


def sheet_provenance(session: Session, sheet: Sheet, approval: SheetApproval, files: list[str]) -> dict[str, Any]:
    names = {user.id: user.display_name for user in session.scalars(select(User))}
    traces = traces_of_sheet(session, sheet.id)
    fits = [fit for trace in traces for fit in fits_of_trace(session, trace.id)]
    return {
        "id": sheet.id,
        "filename": sheet.filename,
        "page_index": sheet.page_index,
        "source_sha256": session.scalar(select(SourceFile.sha256).where(SourceFile.id == sheet.source_file_id)),
        "record_sha256": sheet_record(session, sheet).sha256,
        "calibration": _calibration(session, sheet, names),
        "traces": [
            {
                "id": t.id,
                "version": t.version,
                "name": t.name,
                "unit": t.unit,
                "origin": t.origin,
                "vertex_count": len(json.loads(t.vertices)),
                "created_by": names.get(t.created_by_id or 0),
                "updated_at": iso_utc(t.updated_at),
            }
            for t in traces
        ],
        "fits": [
            {
                "id": f.id,
                "version": f.version,
                "trace_id": f.trace_id,
                "trace_version": f.trace_version,
                "calibration_version": f.calibration_version,
                "family": f.family,
                "stale": f.stale,
            }
            for f in fits
        ],
        **_digitized_by(session, sheet.id),
        "task": _task(session, sheet.id, names),
        "approval": {
            "state": approval.state,
            "signed_by": approval.signed_by,
            "signed_at": iso_utc(approval.signed_at),
            "record_sha256": approval.record_sha256,
            "void_reason": approval.void_reason,
        },
        "files": files,
    }


def bundle_header(
    collection: Collection,
    *,
    generated_by: str,
    generated_at: datetime,
    options: dict[str, Any],
    job: dict[str, int] | None = None,
) -> dict[str, Any]:
    """The document's head; ``job`` is the background job (id, attempt) that built it, null when built at once."""
    return {
        "format": PROVENANCE_FORMAT,
        "software": {"name": "Tracedesk", "version": __version__},
        "generated_at": iso_utc(generated_at),
        "generated_by": generated_by,
        "collection": {
            "id": collection.id,
            "name": collection.name,
            "site": collection.site,
            "instrument": collection.instrument,
        },
        "options": options,
        "job": job,
    }


def json_safe(value: Any) -> Any:
    """Non-finite numbers (NaN, infinity) become null, so the document is strict JSON."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {key: json_safe(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [json_safe(item) for item in value]
    return value
