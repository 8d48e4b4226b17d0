"""HTML routes of batch runs: a run with every sheet's verdict, the reason a person must look and the sheet's task
(and a Resume button when its job stopped early), and the list of a collection's runs.

Readable without JavaScript; refresh the page to follow a running batch (progress is also at /api/v1/jobs/{id}).
"""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from tracedesk.accounts.permissions import Permission
from tracedesk.archive.service import get_collection
from tracedesk.db import transaction
from tracedesk.digitizing.batch import batch_run_read, batch_runs_of_collection, resume_batch_run
from tracedesk.errors import Conflict
from tracedesk.web.deps import Principal, SessionDep, requires
from tracedesk.web.state import app_state
from tracedesk.web.templating import render

router = APIRouter(include_in_schema=False)
Reader = Annotated[Principal, Depends(requires(Permission.READ))]
Manager = Annotated[Principal, Depends(requires(Permission.MANAGE_COLLECTIONS))]


def _run_page(request: Request, principal: Principal, run_id: int, *, message: str = "") -> HTMLResponse:
    with transaction(app_state(request).reader) as db:
        run = batch_run_read(db, run_id)
        collection = get_collection(db, run.collection_id)
    context = {
        "run": run,
        "collection": collection,
        "can_resume": principal.can(Permission.MANAGE_COLLECTIONS),
        "message": message,
    }
    return render(request, "digitizing/batch_run.html", principal, context, status_code=409 if message else 200)


@router.get("/batch-runs/{run_id}", response_class=HTMLResponse)
def batch_run_page(run_id: int, request: Request, principal: Reader) -> HTMLResponse:
    return _run_page(request, principal, run_id)


@router.post("/batch-runs/{run_id}/resume", response_class=HTMLResponse)
def resume_batch_run_form(run_id: int, request: Request, principal: Manager) -> Response:
    """The page's Resume button: queue the run's pending sheets again, then show the run (409 page: nothing to do)."""
    try:
        resume_batch_run(app_state(request), run_id, actor=principal.actor)
    except Conflict as error:
        return _run_page(request, principal, run_id, message=error.message)
    return RedirectResponse(f"/batch-runs/{run_id}", status_code=303)


@router.get("/collections/{collection_id}/batch-runs", response_class=HTMLResponse)
def collection_batch_runs_page(collection_id: int, request: Request, principal: Reader, db: SessionDep) -> HTMLResponse:
    collection = get_collection(db, collection_id)
    runs = batch_runs_of_collection(db, collection_id)
    return render(request, "digitizing/batch_runs.html", principal, {"collection": collection, "runs": runs})
