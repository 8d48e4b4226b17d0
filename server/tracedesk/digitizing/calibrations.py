"""Calibration use cases: store a sheet's calibration (validated by the science core), read it, map through it."""

from __future__ import annotations

import json
from collections import OrderedDict
from collections.abc import Mapping
from threading import Lock
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor, record_event
from tracedesk.digitizing.schemas import CalibrationRead, PointResidual
from tracedesk.errors import Unprocessable
from tracedesk.models import Calibration, Sheet
from tracedesk.models.base import utcnow
from tracedesk.science.calibration import ChartMapping, build_calibration

_CACHE_SIZE = 256
_cache: OrderedDict[tuple[int, int, str], ChartMapping] = OrderedDict()
_cache_lock = Lock()
# Calibrations refitted with one click moved (the shared-error factor of every fit on a sheet needs the same
# dozens of them): remembered by their canonical JSON, so only a sheet's first fit pays for the refits.
_MOVED_CACHE_SIZE = 1024
_moved: OrderedDict[str, ChartMapping] = OrderedDict()


def calibration_of(session: Session, sheet_id: int) -> Calibration | None:
    return session.scalar(select(Calibration).where(Calibration.sheet_id == sheet_id))


def require_calibration(session: Session, sheet_id: int) -> Calibration:
    row = calibration_of(session, sheet_id)
    if row is None:
        raise Unprocessable(f"sheet {sheet_id} has no calibration yet: calibrate it first (PUT .../calibration)")
    return row


def mapping_of(row: Calibration) -> ChartMapping:
    """The calibration object for a stored row, cached per (row, version, spec): rebuilding refits the points.

    The spec is part of the key because row ids and versions repeat across databases served by one process
    (test databases, a restored backup), and a cached mapping must never answer for another calibration.
    """
    key = (row.id, row.version, row.spec)
    with _cache_lock:
        if key in _cache:
            _cache.move_to_end(key)
            return _cache[key]
    mapping = build_calibration(json.loads(row.spec))
    with _cache_lock:
        _cache[key] = mapping
        while len(_cache) > _CACHE_SIZE:
            _cache.popitem(last=False)
    return mapping


def build_remembered(spec: Mapping[str, Any]) -> ChartMapping:
    """``build_calibration`` for specs that recur (a calibration with one click moved), remembered by content."""
    key = json.dumps(spec, sort_keys=True, separators=(",", ":"))
    with _cache_lock:
        if key in _moved:
            _moved.move_to_end(key)
            return _moved[key]
    mapping = build_calibration(spec)
    with _cache_lock:
        _moved[key] = mapping
        while len(_moved) > _MOVED_CACHE_SIZE:
            _moved.popitem(last=False)
    return mapping


def _summary(report: dict[str, Any]) -> dict[str, Any]:
    return {name: report.get(name) for name in ("transform", "rms_px", "rms_values", "loo_rms_px", "warnings")}


def _check_inside(sheet: Sheet, spec: dict[str, Any]) -> None:
    """Control points must lie on the sheet (a click outside the image is a mistake, not a point)."""
    for index, point in enumerate(spec.get("control_points") or []):
        pixel = point.get("pixel") if isinstance(point, dict) else None
        if isinstance(pixel, list) and len(pixel) == 2 and all(isinstance(p, int | float) for p in pixel):
            u, v = pixel
            if not (0 <= u <= sheet.width and 0 <= v <= sheet.height):
                raise Unprocessable(
                    f"control_points[{index}].pixel: ({u}, {v}) lies outside the sheet "
                    f"({sheet.width} x {sheet.height} px)"
                )


def put_calibration(
    session: Session,
    sheet: Sheet,
    spec: dict[str, Any],
    *,
    actor: Actor,
    reason: str | None = None,
    origin: str = "manual",
) -> tuple[Calibration, bool]:
    """Fit and store the sheet's calibration; returns the row and whether an earlier one was replaced."""
    _check_inside(sheet, spec)
    mapping = build_calibration(spec)  # ScienceInputError (422) before anything is stored
    report = mapping.residual_report.to_dict()
    row = calibration_of(session, sheet.id)
    replaced = row is not None
    old_spec = json.loads(row.spec) if row is not None else None
    if row is None:
        row = Calibration(sheet_id=sheet.id, kind=spec["kind"], spec="{}", report="{}", version=0)
        session.add(row)
    row.kind = str(spec["kind"])
    row.spec = json.dumps(spec, sort_keys=True)
    row.report = json.dumps(report)
    row.origin = origin
    row.updated_by_id = actor.id
    row.updated_at = utcnow()
    row.version += 1
    session.flush()
    changes = {"spec": {"old": old_spec, "new": spec}, "report": {"old": None, "new": _summary(report)}}
    record_event(
        session,
        actor=actor,
        action="calibrate",
        entity_type="calibration",
        entity_id=sheet.id,
        entity_version=row.version,
        changes=changes,
        reason=reason,
    )
    return row, replaced


def calibration_read(row: Calibration) -> CalibrationRead:
    spec = json.loads(row.spec)
    report = json.loads(row.report)
    points = spec.get("control_points") or spec.get("check_points") or []
    residuals = []
    for index, point in enumerate(points):
        if index >= len(report.get("residual_distance_px") or []):
            break
        residuals.append(
            PointResidual(
                pixel=point.get("pixel", []),
                value=[v if isinstance(v, int | float) else float("nan") for v in _as_list(point.get("value"))],
                residual_px=report["residual_distance_px"][index] or 0.0,
                residual_units=[v if v is not None else float("nan") for v in report["residuals_values"][index]],
                outlier=bool(report["outliers"][index]),
            )
        )
    return CalibrationRead(
        sheet_id=row.sheet_id,
        kind=row.kind,
        version=row.version,
        spec=spec,
        transform=report.get("transform"),
        residuals=residuals,
        rms_px=report.get("rms_px"),
        rms_units=report.get("rms_values"),
        loo_rms_px=report.get("loo_rms_px"),
        warnings=report.get("warnings") or [],
        updated_at=row.updated_at,
        origin=row.origin,
        report=report,
    )


def _as_list(value: Any) -> list[Any]:
    return value if isinstance(value, list) else [value]


def x_unit_of(row: Calibration | None) -> str:
    """The unit of x: hours on time axes and circular charts, else the x axis' own unit (if given)."""
    if row is None:
        return ""
    spec = json.loads(row.spec)
    if row.kind in {"circular", "strip_speed"}:
        return "h"
    x_axis = spec.get("x_axis") or {}
    if x_axis.get("scale") == "time":
        return "h"
    return str(x_axis.get("unit") or "")
