"""One sheet of a batch run, without the database: register it, trace each expected pen, score, decide.

Cartesian sheets are traced in the box their grid intersections span; circular sheets over the annulus
between the outermost rings, clockwise from the time-zero line, so a full turn never crosses time zero.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Final

import numpy as np
from numpy.typing import NDArray

from tracedesk.digitizing import traces
from tracedesk.digitizing.batch_schemas import BatchRunCreate, BatchThresholds
from tracedesk.digitizing.detection import detect_calibration
from tracedesk.digitizing.schemas import AutoRegion, AutoTraceRequest
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.trace_regions import AnnulusRegion, BoxRegion
from tracedesk.science.tracing import TraceResult

READY, NEEDS_PERSON, SKIPPED = "ready_for_review", "needs_person", "skipped"
# The annulus reaches this fraction of the ring band (at least ANNULUS_MARGIN_PX) past the outer rings, so a
# pen at full or zero scale, drawn on a ring, is inside it.
ANNULUS_MARGIN: Final = 0.01
ANNULUS_MARGIN_PX: Final = 2.0


@dataclass
class SheetOutcome:
    """What the batch found on one sheet: the verdict, its figures, and what to store."""

    status: str
    score: dict[str, Any]
    reason: str
    detection: dict[str, Any] | None = None
    traces: list[tuple[AutoTraceRequest, TraceResult]] = field(default_factory=list)


def trace_region(detection: dict[str, Any]) -> tuple[AutoRegion, BoxRegion | AnnulusRegion]:
    """Where to trace: the request's region (as stored with the trace) and the science region."""
    if detection["kind"] == "circular":
        axis = detection["calibration"]["value_axis"]
        low, high = sorted((float(axis["radius_min_px"]), float(axis["radius_max_px"])))
        margin = max(ANNULUS_MARGIN_PX, ANNULUS_MARGIN * (high - low))
        centre = detection["calibration"]["centre"]
        annulus = AnnulusRegion(
            (float(centre[0]), float(centre[1])),
            max(0.0, low - margin),
            high + margin,
            start_angle_deg=float(detection["time_zero"]["angle_deg"]),
        )
        return AutoRegion(calibrated_area=True), annulus
    pixels = np.asarray([point["pixel"] for point in detection["control_points"]], dtype=np.float64)
    box = [float(pixels[:, 0].min()), float(pixels[:, 1].min()), float(pixels[:, 0].max()), float(pixels[:, 1].max())]
    return AutoRegion(box=box), BoxRegion(*box)


def _span(region: BoxRegion | AnnulusRegion) -> float:
    """Length of the traced span in the unit of the trace's gap spans (u px for boxes, degrees for annuli)."""
    return region.sweep_deg if isinstance(region, AnnulusRegion) else region.u1 - region.u0


def gap_figures(result: TraceResult, span: float, min_fraction: float) -> dict[str, Any]:
    """Gaps a person would see (longer than ``min_fraction`` of the span), the shorter ones, and the longest.

    A pen crossing a dark grid line or a ring loses a column or two of colour; those short gaps are bridged
    and counted apart, so the verdict turns on the gaps that hide part of the record.
    """
    lengths = np.array([end - start for start, end in result.gap_spans], dtype=np.float64)
    seen = lengths > min_fraction * span
    return {
        "gaps": int(seen.sum()),
        "short_gaps": int((~seen).sum()),
        "longest_gap": float(lengths.max() / span) if lengths.size else 0.0,
    }


def verdict_reason(score: dict[str, Any], thresholds: BatchThresholds) -> str:
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
            return (
                f"pen {pen['name']}: {pen['gaps']} gaps longer than {thresholds.min_gap_fraction:.1%} of the chart "
                f"(more than {thresholds.max_gaps})"
            )
    return ""


def _registration_score(detection: dict[str, Any]) -> dict[str, Any]:
    return {
        "kind": detection["kind"],
        "confidence": detection["confidence"],
        "orientation": detection["orientation"],
        "rotation_deg": detection.get("rotation_deg"),
        "registration_rms_px": detection["residuals"]["rms_px"] or 0.0,
        "pens": [],
    }


def _trace_pens(
    image: NDArray[np.uint8], detection: dict[str, Any], body: BatchRunCreate, score: dict[str, Any]
) -> list[tuple[AutoTraceRequest, TraceResult]]:
    request_region, region = trace_region(detection)
    found = []
    for pen in body.pens:
        request = AutoTraceRequest(
            name=pen.name, unit=pen.unit, pen_color=pen.pen_color, region=request_region, tolerance=pen.tolerance
        )
        try:
            result = traces.run_auto_trace(image, region, request)
        except ScienceInputError as error:
            score["pens"].append({"name": pen.name, "error": str(error)})
            continue
        score["pens"].append(
            {
                "name": pen.name,
                "coverage": result.coverage,
                **gap_figures(result, _span(region), body.thresholds.min_gap_fraction),
                "median_confidence": float(np.median(result.confidence)) if len(result.confidence) else 0.0,
            }
        )
        found.append((request, result))
    return found


def analyse_sheet(image: NDArray[np.uint8], geometry: dict[str, Any], body: BatchRunCreate) -> SheetOutcome:
    """Register and trace one sheet (no database): the outcome to store."""
    try:
        detection = detect_calibration(image, geometry)
    except ScienceInputError as error:
        return SheetOutcome(NEEDS_PERSON, {}, f"registration refused: {error}")
    if "calibration" not in detection:
        warnings = "; ".join(detection.get("warnings") or [])
        return SheetOutcome(NEEDS_PERSON, {}, f"registration incomplete: {warnings}")
    score = _registration_score(detection)
    found = _trace_pens(image, detection, body, score)
    reason = verdict_reason(score, body.thresholds)
    return SheetOutcome(NEEDS_PERSON if reason else READY, score, reason, detection, found)
