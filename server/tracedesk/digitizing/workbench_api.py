"""JSON routes the digitizing workbench needs besides the engine's own: the colour under a point, a calibration
fitted without storing it (live residuals and its grid), pixels -> values through a saved or draft calibration, a
circle through clicked points, a fit evaluated for drawing on the scan, and calibrations to reuse.

Routes that only read (even when they take a body, as POST) use a read transaction, so they never take the
SQLite write lock.
"""

from __future__ import annotations

import json
from typing import Annotated, Any

import numpy as np
from fastapi import APIRouter, Depends, Query, Request
from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.accounts.permissions import Permission
from tracedesk.archive.service import get_sheet
from tracedesk.db import transaction
from tracedesk.digitizing import calibrations, fits, traces
from tracedesk.digitizing.chart_grid import grid_lines
from tracedesk.digitizing.scan_colour import ink_colour, read_window, window_box
from tracedesk.digitizing.schemas import CalibrationIn
from tracedesk.digitizing.value_pixels import axis_scales, to_pixels
from tracedesk.digitizing.workbench_schemas import (
    CalibrationPreview,
    CalibrationTemplate,
    CircleRead,
    CircleRequest,
    ColourRead,
    FitCurve,
    FitCurveResidual,
    GridLine,
    MapRead,
    MapRequest,
    PreviewResidual,
)
from tracedesk.errors import Unprocessable
from tracedesk.models import Calibration, Sheet
from tracedesk.science.calibration import ChartMapping, build_calibration
from tracedesk.science.circular import fit_circle
from tracedesk.science.errors import ScienceInputError
from tracedesk.web.deps import Principal, SessionDep, requires
from tracedesk.web.state import app_state

router = APIRouter(prefix="/api/v1", tags=["workbench"])
Reader = Annotated[Principal, Depends(requires(Permission.READ))]
MAX_RESIDUALS = 2000


def _reading(request: Request) -> Any:
    return transaction(app_state(request).reader)


@router.get("/sheets/{sheet_id}/colour", response_model=ColourRead)
def sheet_colour(
    sheet_id: int,
    _: Reader,
    request: Request,
    u: Annotated[float, Query(allow_inf_nan=False)],
    v: Annotated[float, Query(allow_inf_nan=False)],
    radius: Annotated[float, Query(ge=0, le=25)] = 3.0,
) -> ColourRead:
    """Colours of the normalised sheet at (u, v) px: the pen ink near the point, the pixel itself and the paper."""
    with _reading(request) as session:
        sheet = get_sheet(session, sheet_id).sheet
        width, height, derived_key = sheet.width, sheet.height, sheet.derived_key
    if not (0 <= u <= width and 0 <= v <= height):
        raise Unprocessable(f"({u:g}, {v:g}) lies outside the sheet ({width} x {height} px)")
    box = window_box(u=u, v=v, radius_px=radius, width=width, height=height)
    sample = ink_colour(read_window(app_state(request).store, derived_key, box=box), u=u, v=v, radius_px=radius)
    return ColourRead(u=u, v=v, radius_px=radius, **sample.__dict__)


def _preview_residuals(report: dict[str, Any], spec: dict[str, Any]) -> list[PreviewResidual]:
    points = spec.get("control_points") or spec.get("check_points") or []
    rows = []
    for index, distance in enumerate(report.get("residual_distance_px") or []):
        point = points[index] if index < len(points) and isinstance(points[index], dict) else {}
        rows.append(
            PreviewResidual(
                index=index,
                pixel=[float(p) for p in point.get("pixel", [])],
                residual_px=report["residuals_px"][index],
                distance_px=distance,
                residual_units=report["residuals_values"][index],
                outlier=bool(report["outliers"][index]),
            )
        )
    return rows


@router.post("/sheets/{sheet_id}/calibration/preview", response_model=CalibrationPreview)
def preview_calibration(sheet_id: int, body: CalibrationIn, _: Reader, request: Request) -> CalibrationPreview:
    """Fit a calibration without storing it: residuals per point, the chosen transform, warnings, grid lines."""
    with _reading(request) as session:
        sheet = get_sheet(session, sheet_id).sheet
        size = (sheet.width, sheet.height)
    spec = body.model_dump(exclude={"reason"}, exclude_none=True)
    mapping = build_calibration(spec)
    report = mapping.residual_report.to_dict()
    return CalibrationPreview(
        kind=spec["kind"],
        transform=report.get("transform"),
        residuals=_preview_residuals(report, spec),
        rms_px=report.get("rms_px"),
        rms_units=report.get("rms_values"),
        loo_rms_px=report.get("loo_rms_px"),
        loo_rms_by_transform=report.get("loo_rms_by_transform") or {},
        warnings=report.get("warnings") or [],
        grid=[GridLine(**line) for line in grid_lines(mapping, spec, size)],
    )


def _units(spec: dict[str, Any]) -> tuple[str, str]:
    if spec.get("kind") == "circular":
        return "h", str((spec.get("value_axis") or {}).get("unit") or "")
    x_axis, y_axis = spec.get("x_axis") or {}, spec.get("y_axis") or {}
    x_unit = "h" if spec.get("kind") == "strip_speed" or x_axis.get("scale") == "time" else x_axis.get("unit")
    return str(x_unit or ""), str(y_axis.get("unit") or "")


@router.post("/sheets/{sheet_id}/calibration/map", response_model=MapRead)
def map_pixels(sheet_id: int, body: MapRequest, _: Reader, request: Request) -> MapRead:
    """Chart values (x in elapsed hours on time axes) at pixels, through a draft or the saved calibration."""
    with _reading(request) as session:
        get_sheet(session, sheet_id)
        if body.spec is not None:
            spec, mapping = body.spec, build_calibration(body.spec)
        else:
            row = calibrations.require_calibration(session, sheet_id)
            spec, mapping = json.loads(row.spec), calibrations.mapping_of(row)
    with np.errstate(all="ignore"):
        values = mapping.pixels_to_values(np.asarray(body.pixels, dtype=np.float64))
    rows = [[float(c) if np.isfinite(c) else None for c in row] for row in values.tolist()]
    x_unit, y_unit = _units(spec)
    return MapRead(values=rows, x_unit=x_unit, y_unit=y_unit)


@router.post("/geometry/circle", response_model=CircleRead)
def circle_through(body: CircleRequest, _: Reader) -> CircleRead:
    """The least-squares circle through points clicked on one ring (its centre) or one time line (the pen arm)."""
    circle = fit_circle(np.asarray(body.points, dtype=np.float64), field="points")
    return CircleRead(
        centre=list(circle.centre),
        radius_px=circle.radius,
        rms_px=circle.rms_px,
        residuals_px=circle.residuals_px.tolist(),
    )


def _band_pairs(lower: np.ndarray, upper: np.ndarray) -> list[list[float | None]]:
    return [[_finite(a), _finite(b)] for a, b in zip(lower.tolist(), upper.tolist(), strict=True)]


def _finite(value: float) -> float | None:
    return float(value) if np.isfinite(value) else None


def _curve_grid(domain: tuple[float, float], count: int, margin: float, period: float | None) -> np.ndarray:
    low, high = domain
    extra = margin * (high - low)
    if period is not None:  # a circular chart repeats: never draw more than one turn
        extra = min(extra, max(0.0, (period - (high - low)) / 2.0))
    return np.linspace(low - extra, high + extra, count)


def _residuals(session: Session, trace_id: int, result: Any, mapping: ChartMapping, scales: Any) -> list[Any]:
    x, y, _, _ = fits.fit_inputs(session, traces.get_trace(session, trace_id))
    keep = np.unique(np.linspace(0, len(x) - 1, min(len(x), MAX_RESIDUALS)).astype(int))
    x, y = x[keep], y[keep]
    residual = y - result.predict(x)
    pixels = to_pixels(mapping, x, y, scales)
    return [
        FitCurveResidual(x=float(a), y=float(b), residual=float(r), pixel=[_finite(p) for p in pixel])
        for a, b, r, pixel in zip(x.tolist(), y.tolist(), residual.tolist(), pixels.tolist(), strict=True)
        if np.isfinite(r)
    ]


def _bands(result: Any, grid: np.ndarray, level: float) -> tuple[Any, Any]:
    try:
        return result.confidence_band(grid, level=level), result.prediction_band(grid, level=level)
    except ScienceInputError:
        return None, None


@router.get("/fits/{fit_id}/curve", response_model=FitCurve)
def fit_curve(
    fit_id: int,
    _: Reader,
    db: SessionDep,
    count: Annotated[int, Query(ge=10, le=5000)] = 400,
    level: Annotated[float, Query(gt=0, lt=1)] = 0.95,
    margin: Annotated[float, Query(ge=0, le=1)] = 0.1,
) -> FitCurve:
    """The fit evaluated for drawing: curve and bands in chart values and pixels (``margin`` of the traced range
    beyond each end, flagged ``outside``), and the residuals of (at most 2000 of) the trace's samples."""
    fit = fits.get_fit(db, fit_id)
    trace = traces.get_trace(db, fit.trace_id)
    row = calibrations.require_calibration(db, trace.sheet_id)
    mapping, scales = calibrations.mapping_of(row), axis_scales(json.loads(row.spec))
    result = fits.refit(db, fit, trace)
    grid = _curve_grid(result.domain, count, margin, mapping.x_period_hours)
    fitted = result.predict(grid)
    confidence, prediction = _bands(result, grid, level)
    pixels = {"fitted": to_pixels(mapping, grid, fitted, scales).tolist()}
    for name, band in (("confidence", confidence), ("prediction", prediction)):
        if band is not None:
            pixels[f"{name}_lower"] = to_pixels(mapping, grid, band.lower, scales).tolist()
            pixels[f"{name}_upper"] = to_pixels(mapping, grid, band.upper, scales).tolist()
    clean = {key: [[_finite(c) for c in p] for p in points] for key, points in pixels.items()}
    return FitCurve(
        fit_id=fit.id,
        fit_version=fit.version,
        trace_id=trace.id,
        stale=fit.stale,
        domain=list(result.domain),
        level=level,
        x=grid.tolist(),
        fitted=[_finite(v) for v in fitted.tolist()],
        outside=result.outside_domain(grid).tolist(),
        confidence=_band_pairs(confidence.lower, confidence.upper) if confidence is not None else None,
        prediction=_band_pairs(prediction.lower, prediction.upper) if prediction is not None else None,
        pixels=clean,
        residuals=_residuals(db, trace.id, result, mapping, scales),
        residual_sd=result.stats.get("residual_sd"),
        caution=confidence.caution if confidence is not None else None,
    )


@router.get("/sheets/{sheet_id}/calibration-templates", response_model=list[CalibrationTemplate])
def calibration_templates(sheet_id: int, _: Reader, db: SessionDep) -> list[CalibrationTemplate]:
    """Saved calibrations of the other sheets of this sheet's collection (newest first, at most 20)."""
    sheet = get_sheet(db, sheet_id).sheet
    query = (
        select(Calibration, Sheet)
        .join(Sheet, Sheet.id == Calibration.sheet_id)
        .where(Sheet.collection_id == sheet.collection_id, Sheet.id != sheet.id)
        .order_by(Calibration.updated_at.desc(), Calibration.id.desc())
        .limit(20)
    )
    return [
        CalibrationTemplate(
            sheet_id=other.id,
            filename=other.filename,
            kind=row.kind,
            version=row.version,
            spec=json.loads(row.spec),
            updated_at=row.updated_at,
        )
        for row, other in db.execute(query).all()
    ]
