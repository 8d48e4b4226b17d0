"""Per-trace period summaries (time axes only): mean, extremes with their times, integral, time above/below."""

from __future__ import annotations

from collections.abc import Iterator

from sqlalchemy.orm import Session

from tracedesk.digitizing.calibrations import require_calibration, x_unit_of
from tracedesk.digitizing.series import chart_start, summaries
from tracedesk.errors import Unprocessable
from tracedesk.exports.csv_cells import Cell, unit_label
from tracedesk.exports.origins import ORIGIN_HEADER, trace_origin_cells
from tracedesk.models import Trace
from tracedesk.science.axes import elapsed_hours_to_iso


def has_time_axis(session: Session, trace: Trace) -> bool:
    return x_unit_of(require_calibration(session, trace.sheet_id)) == "h"


def periods_table(
    session: Session, trace: Trace, *, period_hours: float, origin: float = 0.0, threshold: float | None = None
) -> tuple[list[str], Iterator[list[Cell]]]:
    """Header and one row per period of ``period_hours`` aligned to ``origin`` (elapsed hours); the last columns
    say where the trace and its calibration came from (:mod:`~tracedesk.exports.origins`)."""
    if not has_time_axis(session, trace):
        raise Unprocessable("period summaries need a time axis (x in hours); this trace's chart has none")
    periods = summaries(session, trace, period_hours=period_hours, origin=origin, threshold=threshold, max_gap=None)
    start = chart_start(session, trace)
    unit = trace.unit
    integral_unit = periods[0]["integral_unit"] if periods else (f"{unit}·h" if unit else "h")
    header = ["period start [h]", "period end [h]"]
    if start is not None:
        header += ["period start (ISO 8601)", "period end (ISO 8601)"]
    header += [
        unit_label("mean", unit),
        unit_label("minimum", unit),
        "minimum at [h]",
        unit_label("maximum", unit),
        "maximum at [h]",
        unit_label("integral", integral_unit),
        "time above threshold [h]",
        "time below threshold [h]",
        "samples",
        "coverage",
        *ORIGIN_HEADER,
    ]
    origins = trace_origin_cells(session, trace)

    def rows() -> Iterator[list[Cell]]:
        for period in periods:
            row: list[Cell] = [period["start"], period["end"]]
            if start is not None:
                row += elapsed_hours_to_iso([period["start"], period["end"]], start=start)
            row += [period[name] for name in ("mean", "minimum", "minimum_time", "maximum", "maximum_time")]
            row += [period[name] for name in ("integral", "time_above", "time_below", "sample_count", "coverage")]
            yield row + origins

    return header, rows()
