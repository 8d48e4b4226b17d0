"""HTML routes of the digitizing engine: the workbench of one sheet.

The page is a server-rendered shell: the scan, the calibration, the traces and their fits are in the HTML (readable
without JavaScript), and the ES modules under web/static/js/workbench/ turn it into the interactive workbench over
the JSON API.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Annotated

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, Response

from tracedesk.accounts.permissions import Permission
from tracedesk.archive import service as archive
from tracedesk.archive.views import sheet_read
from tracedesk.digitizing import calibrations, chart_specs, fits, traces
from tracedesk.digitizing.schemas import CalibrationRead, FitRead
from tracedesk.models import ChartSpec, Trace
from tracedesk.web.deps import Principal, SessionDep, requires
from tracedesk.web.templating import render

router = APIRouter(include_in_schema=False)
Reader = Annotated[Principal, Depends(requires(Permission.READ))]
# Rows of the CSV offered as a plain link on the page (the workbench lets people choose their own grid).
DEFAULT_CSV_ROWS = 200


@dataclass(frozen=True)
class TraceSummary:
    """What the page lists of a trace without sending its vertices."""

    id: int
    name: str
    unit: str
    pen_color: str
    origin: str
    version: int
    vertex_count: int
    fits: list[FitRead]
    csv_url: str


def _summary(db: SessionDep, trace: Trace) -> TraceSummary:
    return TraceSummary(
        id=trace.id,
        name=trace.name,
        unit=trace.unit,
        pen_color=trace.pen_color or "#c2410c",
        origin=trace.origin,
        version=trace.version,
        vertex_count=len(json.loads(trace.vertices)),
        fits=[fits.fit_read(fit) for fit in fits.fits_of_trace(db, trace.id)],
        csv_url=f"/api/v1/traces/{trace.id}/resampled.csv?count={DEFAULT_CSV_ROWS}",
    )


@dataclass(frozen=True)
class SpecChoice:
    """A chart spec offered in the Calibrate panel, without its (possibly long) template."""

    id: int
    name: str
    kind: str
    shared: bool
    has_geometry: bool
    has_template: bool


def _spec_choice(spec: ChartSpec) -> SpecChoice:
    return SpecChoice(
        id=spec.id,
        name=spec.name,
        kind=spec.kind,
        shared=spec.collection_id is None,
        has_geometry=bool(spec.geometry),
        has_template=bool(spec.calibration_template),
    )


def _calibration(db: SessionDep, sheet_id: int) -> CalibrationRead | None:
    row = calibrations.calibration_of(db, sheet_id)
    return calibrations.calibration_read(row) if row is not None else None


@router.get("/sheets/{sheet_id}/workbench", response_class=HTMLResponse)
def workbench_page(request: Request, sheet_id: int, principal: Reader, db: SessionDep) -> Response:
    """The digitizing workbench of one sheet: calibrate, trace, fit and read the data."""
    item = archive.get_sheet(db, sheet_id)
    calibration = _calibration(db, sheet_id)
    context = {
        "sheet": sheet_read(item),
        "collection": archive.get_collection(db, item.sheet.collection_id),
        "calibration": calibration,
        "traces": [_summary(db, trace) for trace in traces.traces_of_sheet(db, sheet_id)],
        # The collection's own chart specs and the shared ones.
        "chart_specs": [
            _spec_choice(spec) for spec in chart_specs.list_chart_specs(db, collection_id=item.sheet.collection_id)
        ],
        "can_digitize": principal.can(Permission.DIGITIZE),
        "csv_rows": DEFAULT_CSV_ROWS,
        # The modules start from this instead of asking for a calibration that may not exist yet.
        "initial": {"calibration": calibration.model_dump(mode="json") if calibration is not None else None},
    }
    return render(request, "digitizing/workbench.html", principal, context)
