"""HTML route of a collection's chart specs: the specs it can use (its own and the shared ones) and a form to
describe a spec's printed grid.

The list is in the HTML (readable without JavaScript); the form (web/static/js/chart-specs/) writes through the
JSON API (POST/PATCH /api/v1/chart-specs, If-Match on changes), so the server's grid checks and their messages are
the same as for any other client. "Try on a sheet" calls the detect API without accepting anything.
"""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse

from tracedesk.accounts.permissions import Permission
from tracedesk.archive import service as archive
from tracedesk.digitizing.chart_specs import list_chart_specs
from tracedesk.web.deps import Principal, SessionDep, requires
from tracedesk.web.templating import render

router = APIRouter(include_in_schema=False)
Reader = Annotated[Principal, Depends(requires(Permission.READ))]
# Sheets offered for "Try on a sheet": the first page of the collection is plenty to check a grid description.
TRY_SHEETS = archive.MAX_PAGE


@router.get("/collections/{collection_id}/chart-specs", response_class=HTMLResponse)
def collection_chart_specs_page(
    collection_id: int, request: Request, principal: Reader, db: SessionDep, spec: int | None = None
) -> HTMLResponse:
    """The chart specs usable in a collection, and the printed-grid form (``spec``: the one to open for editing)."""
    collection = archive.get_collection(db, collection_id)
    items, more = archive.list_sheets(db, collection_id=collection_id, limit=TRY_SHEETS)
    context = {
        "collection": collection,
        "specs": list_chart_specs(db, collection_id=collection_id),
        "sheets": [item.sheet for item in items],
        "more_sheets": more is not None,
        # Writing a spec needs the same permission as the JSON API's chart-spec routes.
        "can_edit": principal.can(Permission.DIGITIZE),
        "open_spec": spec,
    }
    return render(request, "digitizing/chart_specs.html", principal, context)
