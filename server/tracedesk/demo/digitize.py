"""The demo's digitizing work, done through the digitizing services so every step is audited as its author's.

Each step is idempotent: it looks for what it would create (a calibration, a trace of that pen, a fit of that
family and options) and only creates what is missing, so loading the demo again, or after an interruption,
finishes the work instead of doubling it.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor
from tracedesk.db import transaction
from tracedesk.demo.clicks import clicked_calibration, manual_vertices, sampled_pen_colour
from tracedesk.demo.scenarios import DemoSheet, FitPlan
from tracedesk.demo.truth import RenderedSheet, SheetTruth
from tracedesk.digitizing.calibrations import calibration_of, put_calibration
from tracedesk.digitizing.fits import create_fit, fits_of_trace
from tracedesk.digitizing.schemas import AutoRegion, AutoTraceRequest, TraceCreate
from tracedesk.digitizing.service import mark_work_started
from tracedesk.digitizing.sheet_image import load_sheet_image
from tracedesk.digitizing.traces import (
    create_manual_trace,
    region_for,
    run_auto_trace,
    store_auto_trace,
    traces_of_sheet,
)
from tracedesk.models import Sheet, Trace
from tracedesk.web.state import AppState

STAGES = ("uploaded", "calibrated", "traced", "fitted")
Say = Callable[[str], None]


@dataclass
class WorkLog:
    """What a load created, and anything that did not go to plan (reported, never fatal)."""

    created: int = 0
    notes: list[str] = field(default_factory=list)


class LazyRender:
    """The sheet's rendering, made only when a step needs the truth (a finished sheet needs none)."""

    def __init__(self, sheet: DemoSheet, dpi: float) -> None:
        self.sheet = sheet
        self.dpi = dpi
        self._rendered: RenderedSheet | None = None

    def get(self) -> RenderedSheet:
        if self._rendered is None:
            self._rendered = self.sheet.render(self.dpi)
        return self._rendered

    @property
    def truth(self) -> SheetTruth:
        return self.get().truth


def _sheet(session: Session, sheet_id: int) -> Sheet:
    sheet = session.get(Sheet, sheet_id)
    assert sheet is not None, f"demo sheet {sheet_id} vanished during loading"
    return sheet


def ensure_calibration(
    state: AppState, plan: DemoSheet, sheet_id: int, render: LazyRender, actor: Actor, log: WorkLog
) -> None:
    with transaction(state.writer) as session:
        if calibration_of(session, sheet_id) is not None:
            return
        sheet = _sheet(session, sheet_id)
        spec = clicked_calibration(render.truth, key=plan.key)
        put_calibration(session, sheet, spec, actor=actor)
        mark_work_started(session, sheet, actor=actor)
        log.created += 1


def _trace_named(session: Session, sheet_id: int, name: str) -> Trace | None:
    return next((trace for trace in traces_of_sheet(session, sheet_id) if trace.name == name), None)


def _manual(state: AppState, plan: DemoSheet, sheet_id: int, render: LazyRender, pen_name: str, actor: Actor) -> None:
    pen = render.truth.pen(pen_name)
    vertices = manual_vertices(pen, key=plan.key, step=plan.manual_step, skip=plan.manual_skip)
    body = TraceCreate(
        name=pen.name, unit=pen.unit, pen_color=pen.colour, vertices=vertices, line_width_px=round(pen.width_px, 2)
    )
    with transaction(state.writer) as session:
        sheet = _sheet(session, sheet_id)
        create_manual_trace(session, sheet, body, actor=actor)
        mark_work_started(session, sheet, actor=actor)


def _auto_request(truth: SheetTruth, pen_name: str, colour: str) -> AutoTraceRequest:
    """Trace in the calibrated area; on a circular chart, clockwise on the screen over the pen's whole run."""
    pen = truth.pen(pen_name)
    extra: dict[str, Any] = {}
    if truth.kind == "circular":
        first, last = pen.pixels[0].tolist(), pen.pixels[-1].tolist()
        clockwise = truth.calibration["time_direction"] == "clockwise"
        extra = {"start": first, "end": last} if clockwise else {"start": last, "end": first}
    return AutoTraceRequest(
        name=pen.name, unit=pen.unit, pen_color=colour, region=AutoRegion(calibrated_area=True), **extra
    )


def _auto(state: AppState, plan: DemoSheet, sheet_id: int, render: LazyRender, pen_name: str, actor: Actor) -> None:
    """Find the pen automatically, as the workbench does: read, trace outside any transaction, then store."""
    with transaction(state.reader) as session:
        derived_key = _sheet(session, sheet_id).derived_key
    image = load_sheet_image(state.store, derived_key)
    body = _auto_request(render.truth, pen_name, sampled_pen_colour(image, render.truth.pen(pen_name)))
    with transaction(state.reader) as session:
        region = region_for(body.region, session, _sheet(session, sheet_id))
    result = run_auto_trace(image, region, body)
    with transaction(state.writer) as session:
        sheet = _sheet(session, sheet_id)
        store_auto_trace(session, sheet, body, result, actor=actor)
        mark_work_started(session, sheet, actor=actor)


def ensure_traces(
    state: AppState, plan: DemoSheet, sheet_id: int, render: LazyRender, actor: Actor, log: WorkLog
) -> None:
    for pen in plan.pens:
        with transaction(state.reader) as session:
            if _trace_named(session, sheet_id, pen.name) is not None:
                continue
        if plan.trace_mode == "manual":
            _manual(state, plan, sheet_id, render, pen.name, actor)
        else:
            try:
                _auto(state, plan, sheet_id, render, pen.name, actor)
            except (ValueError, RuntimeWarning) as error:  # the demo must load even if a trace fails
                log.notes.append(
                    f"{plan.filename}: automatic tracing of {pen.name!r} failed ({error}); "
                    "a manual trace was stored instead"
                )
                _manual(state, plan, sheet_id, render, pen.name, actor)
        log.created += 1


def _has_fit(session: Session, trace: Trace, fit_plan: FitPlan) -> bool:
    wanted = json.dumps(fit_plan.options, sort_keys=True)
    return any(fit.family == fit_plan.family and fit.options == wanted for fit in fits_of_trace(session, trace.id))


def ensure_fits(state: AppState, plan: DemoSheet, sheet_id: int, actor: Actor, log: WorkLog) -> None:
    for fit_plan in plan.fits:
        with transaction(state.writer) as session:
            trace = _trace_named(session, sheet_id, fit_plan.pen)
            if trace is None or _has_fit(session, trace, fit_plan):
                continue
            try:  # the model is computed before anything is written, so a failure leaves no trace
                create_fit(session, trace, fit_plan.family, dict(fit_plan.options), actor=actor)
            except ValueError as error:
                log.notes.append(f"{plan.filename}: the {fit_plan.family} fit of {fit_plan.pen!r} failed ({error})")
                continue
            log.created += 1


def digitize_sheet(
    state: AppState, plan: DemoSheet, sheet_id: int, render: LazyRender, actors: dict[str, Actor], log: WorkLog
) -> None:
    """Carry the sheet as far as its plan's stage: calibrated, traced, fitted."""
    stage = STAGES.index(plan.stage)
    actor = actors[plan.digitizer]
    if stage >= STAGES.index("calibrated"):
        ensure_calibration(state, plan, sheet_id, render, actor, log)
    if stage >= STAGES.index("traced"):
        ensure_traces(state, plan, sheet_id, render, actor, log)
    if stage >= STAGES.index("fitted"):
        ensure_fits(state, plan, sheet_id, actor, log)
