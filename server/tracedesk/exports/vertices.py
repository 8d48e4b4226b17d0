"""Per-trace raw vertices: pixel coordinates as stored and chart coordinates with their standard uncertainty."""

from __future__ import annotations

import json
from collections.abc import Iterator

import numpy as np
from sqlalchemy.orm import Session

from tracedesk.digitizing.calibrations import calibration_of, x_unit_of
from tracedesk.digitizing.series import chart_start
from tracedesk.digitizing.traces import samples_of, trace_pixels
from tracedesk.exports.csv_cells import Cell, unit_label
from tracedesk.exports.origins import ORIGIN_HEADER, origin_cells
from tracedesk.models import Trace
from tracedesk.science.axes import elapsed_hours_to_iso


def _finite(value: float) -> float | None:
    return value if np.isfinite(value) else None


def vertices_table(session: Session, trace: Trace) -> tuple[list[str], Iterator[list[Cell]]]:
    """Header and rows: vertex number, u and v (px), x and value with their standard uncertainties, confidence,
    then the trace's and the calibration's origin (:mod:`~tracedesk.exports.origins`).

    Chart columns are empty when the sheet is not calibrated or the vertex lies outside the calibrated chart;
    a time column (ISO 8601) is added when the calibration knows the chart's start.
    """
    pixels = trace_pixels(trace)
    calibration = calibration_of(session, trace.sheet_id)
    x_unit = x_unit_of(calibration)
    if calibration is not None and len(pixels):
        values, sigma, _ = samples_of(session, trace)
        start = chart_start(session, trace)
    else:
        values = sigma = np.full((len(pixels), 2), np.nan)
        start = None
    times = elapsed_hours_to_iso(values[:, 0], start=start) if start is not None else None
    confidence = json.loads(trace.confidence)
    header = ["vertex", "u [px]", "v [px]", unit_label("x", x_unit)]
    if times is not None:
        header.append("time (ISO 8601)")
    header += [
        unit_label(trace.name, trace.unit),
        unit_label("x standard uncertainty", x_unit),
        unit_label(f"{trace.name} standard uncertainty", trace.unit),
        "confidence",
        *ORIGIN_HEADER,
    ]
    origins = origin_cells(trace, calibration)

    def rows() -> Iterator[list[Cell]]:
        for index, (u, v) in enumerate(pixels.tolist()):
            row: list[Cell] = [index + 1, u, v, _finite(float(values[index, 0]))]
            if times is not None:
                row.append(times[index])
            row += [_finite(float(values[index, 1])), _finite(float(sigma[index, 0])), _finite(float(sigma[index, 1]))]
            row.append(float(confidence[index]) if index < len(confidence) else None)
            yield row + origins

    return header, rows()
