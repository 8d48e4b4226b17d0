"""Where a trace's numbers came from, as the last columns of every per-trace CSV and of the fitted-equation rows.

A reader of the CSV alone can tell automatic results apart: the trace's origin is ``auto`` (a batch run or the
automatic tracer wrote it), ``edited`` (automatic, then changed by a person) or ``manual``; the calibration's
origin is ``automatic`` (registered from the printed grid) or ``manual`` (control points placed by a person),
empty when the sheet has no calibration.
"""

from __future__ import annotations

from sqlalchemy.orm import Session

from tracedesk.digitizing.calibrations import calibration_of
from tracedesk.exports.csv_cells import Cell
from tracedesk.models import Calibration, Trace

ORIGIN_HEADER = ["trace origin (auto, edited, manual)", "calibration origin (automatic, manual)"]


def origin_cells(trace: Trace, calibration: Calibration | None) -> list[Cell]:
    """The two origin cells of ``trace`` on a sheet calibrated by ``calibration`` (``None``: not calibrated)."""
    return [trace.origin, calibration.origin if calibration is not None else None]


def trace_origin_cells(session: Session, trace: Trace) -> list[Cell]:
    return origin_cells(trace, calibration_of(session, trace.sheet_id))
