"""HTML routes of the archive: collections, a collection's sheet grid with upload, and the sheet viewer."""

from __future__ import annotations

import json
from typing import Annotated

from fastapi import APIRouter, Depends, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from pydantic import ValidationError

from tracedesk.accounts.permissions import Permission
from tracedesk.archive import service
from tracedesk.archive.schemas import CollectionCreate, SheetUpdate
from tracedesk.archive.views import sheet_read
from tracedesk.errors import AppError, PreconditionFailed
from tracedesk.web.deps import Principal, SessionDep, requires
from tracedesk.web.templating import render

router = APIRouter(include_in_schema=False)
Reader = Annotated[Principal, Depends(requires(Permission.READ))]
Editor = Annotated[Principal, Depends(requires(Permission.EDIT_ARCHIVE))]
PAGE_SIZE = 48


@router.get("/", response_class=HTMLResponse)
def home(request: Request, principal: Reader, db: SessionDep) -> Response:
    """The home page: the first-run checklist and, when loaded, the demo tour (``tracedesk.demo.home``)."""
    from tracedesk.demo.home import home_context

    is_admin = principal.can(Permission.MANAGE_USERS)
    return render(request, "home.html", principal, home_context(db, is_admin=is_admin))


def _collections_page(
    request: Request, principal: Principal, db: SessionDep, message: str = "", status_code: int = 200
) -> Response:
    context = {"collections": service.list_collections(db), "message": message}
    return render(request, "archive/collections.html", principal, context, status_code=status_code)


@router.get("/collections", response_class=HTMLResponse)
def collections_page(request: Request, principal: Reader, db: SessionDep) -> Response:
    return _collections_page(request, principal, db)


@router.post("/collections", response_class=HTMLResponse)
def collections_add(
    request: Request,
    principal: Editor,
    db: SessionDep,
    name: Annotated[str, Form(max_length=200)],
    description: Annotated[str, Form(max_length=10_000)] = "",
    site: Annotated[str, Form(max_length=200)] = "",
    instrument: Annotated[str, Form(max_length=200)] = "",
) -> Response:
    try:
        body = CollectionCreate(name=name, description=description, site=site, instrument=instrument)
        collection = service.create_collection(db, body, actor=principal.actor)
    except (AppError, ValidationError) as error:
        message = error.message if isinstance(error, AppError) else "check the collection's fields"
        return _collections_page(request, principal, db, message, status_code=422)
    return RedirectResponse(f"/collections/{collection.id}", status_code=303)


@router.get("/collections/{collection_id}", response_class=HTMLResponse)
def collection_page(
    request: Request,
    collection_id: int,
    principal: Reader,
    db: SessionDep,
    q: str = "",
    status: str = "",
    cursor: str = "",
) -> Response:
    collection = service.get_collection(db, collection_id)
    items, next_cursor = service.list_sheets(
        db, collection_id=collection_id, q=q or None, status=status or None, limit=PAGE_SIZE, cursor=cursor or None
    )
    context = {
        "collection": collection,
        "sheets": [sheet_read(item) for item in items],
        "next_cursor": next_cursor,
        "q": q,
        "status": status,
        "total": service.count_sheets(db, collection_id),
        "can_upload": principal.can(Permission.UPLOAD),
    }
    template = "archive/_sheet_grid.html" if request.headers.get("x-fragment") else "archive/collection.html"
    return render(request, template, principal, context)


@router.get("/sheets/{sheet_id}", response_class=HTMLResponse)
def sheet_page(request: Request, sheet_id: int, principal: Reader, db: SessionDep, message: str = "") -> Response:
    item = service.get_sheet(db, sheet_id)
    collection = service.get_collection(db, item.sheet.collection_id)
    context = {
        "sheet": sheet_read(item),
        "collection": collection,
        "can_edit": principal.can(Permission.EDIT_ARCHIVE),
        "message": message,
    }
    return render(request, "archive/sheet.html", principal, context)


@router.post("/sheets/{sheet_id}/metadata", response_class=HTMLResponse)
def sheet_metadata_save(
    request: Request,
    sheet_id: int,
    principal: Editor,
    db: SessionDep,
    version: Annotated[int, Form()],
    source_ref: Annotated[str, Form(max_length=200)] = "",
    recorded_from: Annotated[str, Form(max_length=40)] = "",
    recorded_to: Annotated[str, Form(max_length=40)] = "",
    station: Annotated[str, Form(max_length=200)] = "",
    notes: Annotated[str, Form(max_length=10_000)] = "",
    tags: Annotated[str, Form(max_length=2000)] = "",
    reason: Annotated[str, Form(max_length=2000)] = "",
) -> Response:
    item = service.get_sheet(db, sheet_id)
    if version != item.sheet.version:
        raise PreconditionFailed(
            "someone else changed this sheet meanwhile; reload the page and apply your change again"
        )
    body = SheetUpdate(
        source_ref=source_ref,
        recorded_from=recorded_from,
        recorded_to=recorded_to,
        station=station,
        notes=notes,
        tags=[tag for tag in tags.split(",")],
        reason=reason or None,
    )
    service.update_sheet(db, item.sheet, body, actor=principal.actor)
    return RedirectResponse(f"/sheets/{sheet_id}", status_code=303)


def tags_text(raw: str) -> str:
    return ", ".join(json.loads(raw))
