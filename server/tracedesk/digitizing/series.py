"""Resampled series and period summaries of a trace (CSV and JSON), from its samples or one of its fits."""

from __future__ import annotations

import json
from dataclasses import asdict
from datetime import datetime
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from tracedesk.digitizing.calibrations import require_calibration, x_unit_of
from tracedesk.digitizing.fits import fit_inputs, get_fit, refit
from tracedesk.errors import Unprocessable
from tracedesk.exports.csv_cells import Cell, unit_label, write_csv
from tracedesk.exports.origins import ORIGIN_HEADER, origin_cells
from tracedesk.models import Trace
from tracedesk.science.axes import elapsed_hours_to_iso, parse_iso_datetime
from tracedesk.science.resampling import ResampledSeries, resample_fit, resample_samples, uniform_grid
from tracedesk.science.summaries import summarise_periods

MAX_GRID_POINTS = 1_000_000


def chart_start(session: Session, trace: Trace) -> datetime | None:
    """The absolute time of the chart's time zero, when the calibration knows it."""
    spec = json.loads(require_calibration(session, trace.sheet_id).spec)
    text = spec.get("start") or (spec.get("x_axis") or {}).get("start")
    return parse_iso_datetime(text, field="start") if text else None


def resample(
    session: Session,
    trace: Trace,
    *,
    step: float | None,
    count: int | None,
    start: float | None,
    stop: float | None,
    method: str,
    fit_id: int | None,
    max_gap: float | None,
) -> ResampledSeries:
    x, y, _, _ = fit_inputs(session, trace)
    lo = float(x[0]) if start is None else start
    hi = float(x[-1]) if stop is None else stop
    if step is not None and step > 0 and (hi - lo) / step > MAX_GRID_POINTS:
        raise Unprocessable(f"that grid has more than {MAX_GRID_POINTS:,} points; choose a larger step")
    grid = uniform_grid(start=lo, stop=hi, step=step, count=count)
    if method == "fit":
        if fit_id is None:
            raise Unprocessable("method=fit needs fit_id")
        fit = get_fit(session, fit_id)
        if fit.trace_id != trace.id:
            raise Unprocessable(f"fit {fit_id} does not belong to trace {trace.id}")
        return resample_fit(refit(session, fit, trace), grid=grid, sample_x=x, max_gap=max_gap)
    return resample_samples(x, y, grid=grid, method=method, max_gap=max_gap)


def resampled_csv(session: Session, trace: Trace, series: ResampledSeries) -> str:
    """One row per grid point: x (and its ISO 8601 time when the chart start is known), value; gaps empty; the
    trace's and the calibration's origin last (``exports/origins.py``), so automatic results show as such."""
    calibration = require_calibration(session, trace.sheet_id)
    x_unit = x_unit_of(calibration)
    origin = chart_start(session, trace)
    header = [unit_label("x", x_unit)]
    if origin is not None:
        header.append("time (ISO 8601)")
    header += [unit_label(trace.name, trace.unit), "flag", *ORIGIN_HEADER]
    provenance = origin_cells(trace, calibration)
    times = elapsed_hours_to_iso(series.x, start=origin) if origin is not None else None
    rows: list[list[Cell]] = []
    for index, (x_value, y_value) in enumerate(zip(series.x.tolist(), series.y.tolist(), strict=True)):
        flag = "outside" if series.outside[index] else "gap" if series.gap[index] else ""
        row: list[Cell] = [x_value]
        if times is not None:
            row.append(times[index])
        row += [None if np.isnan(y_value) else y_value, flag, *provenance]
        rows.append(row)
    return write_csv(header, rows)


def summaries(
    session: Session,
    trace: Trace,
    *,
    period_hours: float,
    origin: float,
    threshold: float | None,
    max_gap: float | None,
) -> list[dict[str, Any]]:
    x, y, _, _ = fit_inputs(session, trace)
    periods = summarise_periods(
        x, y, span_hours=period_hours, origin=origin, threshold=threshold, unit=trace.unit, max_gap=max_gap
    )
    return [asdict(period) for period in periods]
