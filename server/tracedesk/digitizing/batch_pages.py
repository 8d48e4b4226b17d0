"""HTML route of a batch run: every sheet's verdict, the reason a person must look, and the sheet's task.

Readable without JavaScript; refresh the page to follow a running batch (progress is also at /api/v1/jobs/{id}).
"""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse

from tracedesk.accounts.permissions import Permission
from tracedesk.archive.service import get_collection
from tracedesk.digitizing.batch import batch_run_read
from tracedesk.web.deps import Principal, SessionDep, requires
from tracedesk.web.templating import render

router = APIRouter(include_in_schema=False)
Reader = Annotated[Principal, Depends(requires(Permission.READ))]


@router.get("/batch-runs/{run_id}", response_class=HTMLResponse)
def batch_run_page(run_id: int, request: Request, principal: Reader, db: SessionDep) -> HTMLResponse:
    run = batch_run_read(db, run_id)
    collection = get_collection(db, run.collection_id)
    return render(request, "digitizing/batch_run.html", principal, {"run": run, "collection": collection})
