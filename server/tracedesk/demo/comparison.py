"""Digitized values of the demo sheets beside their known truth: how close each trace came.

Every demo pen writes a known function of time, so any trace on a demo sheet (made by the demo or by a visitor
trying the workbench) can be compared with it: the trace's samples, read through the sheet's current
calibration, against the function at the same times.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.demo.paper import hex_colour
from tracedesk.demo.scenarios import DemoPen, DemoSheet, demo_sheet_by_filename
from tracedesk.digitizing.calibrations import calibration_of
from tracedesk.digitizing.traces import samples_of, traces_of_sheet
from tracedesk.models import Collection, Sheet, Trace


@dataclass(frozen=True)
class TruthComparison:
    """One trace of a demo sheet against the function its pen wrote, along the traced range.

    ``rms`` and ``largest`` are in the pen's unit; ``relative_percent`` is the RMS difference as a percentage of
    the chart's full scale (of the value itself on a log scale).
    """

    sheet_id: int
    filename: str
    trace_id: int
    trace_name: str
    origin: str
    unit: str
    samples: int
    rms: float
    largest: float
    relative_percent: float
    relative_basis: str
    formula: str


def _pen_for(plan: DemoSheet, trace: Trace) -> DemoPen:
    """The pen a trace follows: by name, else the pen nearest its colour."""
    for pen in plan.pens:
        if pen.name == trace.name:
            return pen
    if not trace.pen_color:
        return plan.pens[0]
    colour = np.asarray(hex_colour(trace.pen_color))
    return min(plan.pens, key=lambda pen: float(np.sum((np.asarray(hex_colour(pen.colour)) - colour) ** 2)))


def _traced_line(values: np.ndarray, pen: DemoPen, log_scale: bool) -> tuple[np.ndarray, np.ndarray] | None:
    """The trace as a line (samples joined in x order) at the pen's dense truth times inside the traced range."""
    x, y = values[:, 0], values[:, 1]
    keep = np.isfinite(x) & np.isfinite(y) & (x >= pen.span[0]) & (x <= pen.span[1])
    if log_scale:
        keep &= y > 0
    if keep.sum() < 2:
        return None
    order = np.argsort(x[keep], kind="stable")
    xs, ys = x[keep][order], y[keep][order]
    grid = np.linspace(xs[0], xs[-1], 4000)
    return grid, np.interp(grid, xs, ys)


def compare_trace(session: Session, plan: DemoSheet, sheet: Sheet, trace: Trace) -> TruthComparison | None:
    """The trace, as the line through its samples (what a resampled export holds), against its pen's function."""
    values, _, _ = samples_of(session, trace)
    pen = _pen_for(plan, trace)
    line = _traced_line(values, pen, plan.log_scale)
    if line is None:
        return None
    grid, traced = line
    truth = pen.signal(grid)
    difference = traced - truth
    if plan.log_scale:
        relative, basis = float(np.sqrt(np.mean((difference / truth) ** 2))) * 100.0, "of the value"
    else:
        relative, basis = float(np.sqrt(np.mean(difference**2))) / plan.full_scale * 100.0, "of full scale"
    return TruthComparison(
        sheet_id=sheet.id,
        filename=sheet.filename,
        trace_id=trace.id,
        trace_name=trace.name,
        origin=trace.origin,
        unit=pen.unit,
        samples=int(np.isfinite(values).all(axis=1).sum()),
        rms=float(np.sqrt(np.mean(difference**2))),
        largest=float(np.max(np.abs(difference))),
        relative_percent=relative,
        relative_basis=basis,
        formula=pen.signal.formula(),
    )


def truth_comparisons(session: Session) -> list[TruthComparison]:
    """Every calibrated, traced demo sheet's traces against their truth, in sheet order."""
    sheets = session.scalars(
        select(Sheet)
        .join(Collection, Collection.id == Sheet.collection_id)
        .where(Collection.is_demo.is_(True))
        .order_by(Sheet.id)
    )
    rows = []
    for sheet in sheets:
        plan = demo_sheet_by_filename(sheet.filename)
        if plan is None or calibration_of(session, sheet.id) is None:
            continue
        for trace in traces_of_sheet(session, sheet.id):
            row = compare_trace(session, plan, sheet, trace)
            if row is not None:
                rows.append(row)
    return rows
