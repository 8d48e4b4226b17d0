"""Trace use cases: manual and automatic traces, edits with versions, and their samples in chart units."""

from __future__ import annotations

import json
from collections.abc import Callable
from typing import Any

import numpy as np
from numpy.typing import NDArray
from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor, created_fields, record_event
from tracedesk.digitizing.calibrations import calibration_of, mapping_of, require_calibration, x_unit_of
from tracedesk.digitizing.schemas import AutoRegion, AutoTraceRequest, TraceCreate, TraceRead, TraceUpdate
from tracedesk.errors import NotFound, Unprocessable
from tracedesk.models import Calibration, Sheet, Trace
from tracedesk.models.base import utcnow
from tracedesk.science.trace_regions import AnnulusRegion, BoxRegion, PolygonRegion
from tracedesk.science.tracing import TraceResult, trace_pen
from tracedesk.science.uncertainty import value_uncertainty_for

FloatArray = NDArray[np.float64]
TRACE_FIELDS = ("name", "unit", "pen_color", "line_width_px")
# Vertex lists are summarised in the audit trail (count and bounds), not copied whole: the versions are kept
# by the trace's own version history, and a 20,000-vertex list would swamp the trail.
ProgressCallback = Callable[[float], None]


def get_trace(session: Session, trace_id: int) -> Trace:
    trace = session.get(Trace, trace_id)
    if trace is None or trace.withdrawn_reason is not None:
        raise NotFound(f"no trace with id {trace_id}")
    return trace


def traces_of_sheet(session: Session, sheet_id: int) -> list[Trace]:
    query = select(Trace).where(Trace.sheet_id == sheet_id, Trace.withdrawn_reason.is_(None)).order_by(Trace.id)
    return list(session.scalars(query))


def _vertex_summary(vertices: list[list[float]]) -> dict[str, Any]:
    if not vertices:
        return {"count": 0}
    array = np.asarray(vertices, dtype=np.float64)
    return {"count": len(vertices), "u_range": [float(array[:, 0].min()), float(array[:, 0].max())]}


def _check_on_sheet(sheet: Sheet, vertices: list[list[float]]) -> None:
    if not vertices:
        return
    array = np.asarray(vertices, dtype=np.float64)
    outside = (array[:, 0] < 0) | (array[:, 0] > sheet.width) | (array[:, 1] < 0) | (array[:, 1] > sheet.height)
    if outside.any():
        index = int(np.flatnonzero(outside)[0])
        raise Unprocessable(
            f"vertices[{index}] = {vertices[index]} lies outside the sheet ({sheet.width} x {sheet.height} px)"
        )


def create_manual_trace(session: Session, sheet: Sheet, body: TraceCreate, *, actor: Actor) -> Trace:
    _check_on_sheet(sheet, body.vertices)
    trace = Trace(
        sheet_id=sheet.id,
        name=body.name.strip(),
        unit=body.unit.strip(),
        pen_color=body.pen_color,
        origin="manual",
        vertices=json.dumps(body.vertices),
        confidence=json.dumps([1.0] * len(body.vertices)),
        gaps="[]",
        line_width_px=body.line_width_px,
        created_by_id=actor.id,
    )
    session.add(trace)
    session.flush()
    values = {
        **{name: getattr(trace, name) for name in TRACE_FIELDS},
        "origin": "manual",
        "vertices": _vertex_summary(body.vertices),
    }
    record_event(
        session,
        actor=actor,
        action="create",
        entity_type="trace",
        entity_id=trace.id,
        entity_version=trace.version,
        changes=created_fields(values),
    )
    return trace


def region_for(request: AutoRegion, session: Session, sheet: Sheet) -> BoxRegion | PolygonRegion | AnnulusRegion:
    """The science region for an auto-trace request; the calibrated area comes from the sheet's calibration."""
    if request.box is not None:
        u0, v0, u1, v1 = request.box
        return BoxRegion(min(u0, u1), min(v0, v1), max(u0, u1), max(v0, v1))
    if request.polygon is not None:
        return PolygonRegion(request.polygon)
    row = calibration_of(session, sheet.id)
    if row is None:
        raise Unprocessable("calibrated_area needs a calibration on the sheet first")
    spec = json.loads(row.spec)
    if row.kind == "circular":
        axis = spec["value_axis"]
        return AnnulusRegion(tuple(spec["centre"]), float(axis["radius_min_px"]), float(axis["radius_max_px"]))
    pixels = np.asarray([point["pixel"] for point in spec.get("control_points", [])], dtype=np.float64)
    if len(pixels) < 2:
        raise Unprocessable("the calibration has too few control points to define its area")
    return BoxRegion(
        float(pixels[:, 0].min()), float(pixels[:, 1].min()), float(pixels[:, 0].max()), float(pixels[:, 1].max())
    )


def run_auto_trace(
    image: NDArray[np.uint8],
    region: BoxRegion | PolygonRegion | AnnulusRegion,
    body: AutoTraceRequest,
    progress: ProgressCallback | None = None,
) -> TraceResult:
    options: dict[str, Any] = {}
    if body.tolerance is not None:
        options["tolerance"] = body.tolerance
    return trace_pen(
        image,
        pen_colour=body.pen_color,
        region=region,
        start_uv=tuple(body.start) if body.start else None,  # type: ignore[arg-type]
        end_uv=tuple(body.end) if body.end else None,  # type: ignore[arg-type]
        progress=progress,
        **options,
    )


def store_auto_trace(
    session: Session,
    sheet: Sheet,
    body: AutoTraceRequest,
    result: TraceResult,
    *,
    actor: Actor,
    reason: str | None = None,
) -> Trace:
    vertices = result.vertices.tolist()
    trace = Trace(
        sheet_id=sheet.id,
        name=body.name.strip(),
        unit=body.unit.strip(),
        pen_color=body.pen_color.lower(),
        origin="auto",
        vertices=json.dumps(vertices),
        confidence=json.dumps(result.confidence.tolist()),
        gaps=json.dumps([list(span) for span in result.gap_spans]),
        line_width_px=float(result.line_width_px),
        created_by_id=actor.id,
    )
    session.add(trace)
    session.flush()
    values = {
        **{name: getattr(trace, name) for name in TRACE_FIELDS},
        "origin": "auto",
        "vertices": _vertex_summary(vertices),
        "coverage": result.coverage,
        "region": body.region.model_dump(exclude_none=True),
        "tolerance": body.tolerance,
    }
    record_event(
        session,
        actor=actor,
        action="create",
        entity_type="trace",
        entity_id=trace.id,
        entity_version=trace.version,
        changes=created_fields(values),
        reason=reason,
    )
    return trace


def update_trace(session: Session, sheet: Sheet, trace: Trace, body: TraceUpdate, *, actor: Actor) -> Trace:
    before: dict[str, Any] = {name: getattr(trace, name) for name in TRACE_FIELDS}
    after = dict(before)
    for name in ("name", "unit", "pen_color"):
        value = getattr(body, name)
        if value is not None:
            after[name] = value.strip()
    changes = {name: {"old": before[name], "new": after[name]} for name in before if before[name] != after[name]}
    if body.vertices is not None:
        _check_on_sheet(sheet, body.vertices)
        old = json.loads(trace.vertices)
        if old != body.vertices:
            changes["vertices"] = {"old": _vertex_summary(old), "new": _vertex_summary(body.vertices)}
            trace.vertices = json.dumps(body.vertices)
            trace.confidence = json.dumps([1.0] * len(body.vertices))
            trace.gaps = "[]"
            if trace.origin == "auto":
                changes["origin"] = {"old": "auto", "new": "edited"}
                trace.origin = "edited"
    if not changes:
        return trace
    for name in ("name", "unit", "pen_color"):
        setattr(trace, name, after[name])
    trace.version += 1
    trace.updated_at = utcnow()
    record_event(
        session,
        actor=actor,
        action="update",
        entity_type="trace",
        entity_id=trace.id,
        entity_version=trace.version,
        changes=changes,
        reason=body.reason,
    )
    return trace


def withdraw_trace(session: Session, trace: Trace, *, actor: Actor, reason: str) -> None:
    """Traces are never hard-deleted: they are withdrawn with a reason (RELIABILITY.md)."""
    if not reason.strip():
        raise Unprocessable("give a reason for removing the trace")
    trace.withdrawn_reason = reason.strip()
    trace.version += 1
    record_event(
        session,
        actor=actor,
        action="withdraw",
        entity_type="trace",
        entity_id=trace.id,
        entity_version=trace.version,
        changes={},
        reason=reason.strip(),
    )


def trace_pixels(trace: Trace) -> FloatArray:
    return np.asarray(json.loads(trace.vertices), dtype=np.float64).reshape(-1, 2)


def samples_of(session: Session, trace: Trace, row: Calibration | None = None) -> tuple[FloatArray, FloatArray, int]:
    """(values (n, 2), uncertainty (n, 2), calibration version) of a trace through the sheet's calibration.

    ``row`` is the sheet's calibration when the caller has already read it.
    """
    row = row if row is not None else require_calibration(session, trace.sheet_id)
    mapping = mapping_of(row)
    pixels = trace_pixels(trace)
    if len(pixels) == 0:
        return np.empty((0, 2)), np.empty((0, 2)), row.version
    values = mapping.pixels_to_values(pixels)
    sigma = value_uncertainty_for(mapping, pixels, line_width_px=trace.line_width_px)
    return values, sigma, row.version


def _json_rows(array: FloatArray) -> list[list[float | None]]:
    """Rows as JSON-ready lists; non-finite numbers (a pixel outside a log axis' domain, say) become None."""
    rows: list[list[float | None]] = array.tolist()
    for i, j in zip(*np.nonzero(~np.isfinite(array)), strict=True):
        rows[int(i)][int(j)] = None
    return rows


def trace_read(session: Session, trace: Trace) -> TraceRead:
    """The trace as the API shows it, with its samples and uncertainties in chart units when calibrated."""
    row = calibration_of(session, trace.sheet_id)
    samples = uncertainty = None
    calibration_version = None
    if row is not None:
        values, sigma, calibration_version = samples_of(session, trace, row)
        samples = _json_rows(values)
        uncertainty = np.where(np.isfinite(sigma), sigma, np.nan).tolist()
    return TraceRead(
        id=trace.id,
        sheet_id=trace.sheet_id,
        name=trace.name,
        unit=trace.unit,
        pen_color=trace.pen_color,
        origin=trace.origin,
        version=trace.version,
        vertices=json.loads(trace.vertices),
        confidence=json.loads(trace.confidence),
        gaps=json.loads(trace.gaps),
        line_width_px=trace.line_width_px,
        samples=samples,
        uncertainty=uncertainty,
        calibration_version=calibration_version,
        x_unit=x_unit_of(row),
        y_unit=trace.unit,
        created_at=trace.created_at,
        updated_at=trace.updated_at,
    )
