"""JSON routes of the archive: collections, uploads, sheets, originals and tiles under /api/v1."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, File, Query, Request, Response, UploadFile
from fastapi.responses import JSONResponse
from starlette.concurrency import run_in_threadpool

from tracedesk.accounts.permissions import Permission
from tracedesk.archive import files, ingest, ingest_job, service
from tracedesk.archive.schemas import (
    CollectionCreate,
    CollectionRead,
    CollectionUpdate,
    QueuedUploadResult,
    RefusedFile,
    SheetPage,
    SheetRead,
    SheetUpdate,
    UploadResult,
)
from tracedesk.archive.views import collection_read, sheet_read
from tracedesk.web.conditional import require_if_match, set_etag
from tracedesk.web.deps import Principal, SessionDep, requires
from tracedesk.web.state import app_state

router = APIRouter(prefix="/api/v1", tags=["archive"])
Reader = Annotated[Principal, Depends(requires(Permission.READ))]
Uploader = Annotated[Principal, Depends(requires(Permission.UPLOAD))]
Editor = Annotated[Principal, Depends(requires(Permission.EDIT_ARCHIVE))]
Manager = Annotated[Principal, Depends(requires(Permission.MANAGE_COLLECTIONS))]


@router.post("/collections", response_model=CollectionRead, status_code=201)
def create_collection(body: CollectionCreate, principal: Editor, db: SessionDep, response: Response) -> CollectionRead:
    collection = service.create_collection(db, body, actor=principal.actor)
    set_etag(response, "collection", collection.id, collection.version)
    return collection_read(collection, 0)


@router.get("/collections", response_model=list[CollectionRead])
def list_collections(_: Reader, db: SessionDep) -> list[CollectionRead]:
    return [collection_read(collection, count) for collection, count in service.list_collections(db)]


@router.get("/collections/{collection_id}", response_model=CollectionRead)
def get_collection(collection_id: int, _: Reader, db: SessionDep, response: Response) -> CollectionRead:
    collection = service.get_collection(db, collection_id)
    set_etag(response, "collection", collection.id, collection.version)
    return collection_read(collection, service.count_sheets(db, collection.id))


@router.patch("/collections/{collection_id}", response_model=CollectionRead)
def update_collection(
    collection_id: int,
    body: CollectionUpdate,
    principal: Manager,
    request: Request,
    db: SessionDep,
    response: Response,
) -> CollectionRead:
    collection = service.get_collection(db, collection_id)
    require_if_match(request, "collection", collection.id, collection.version)
    service.update_collection(db, collection, body, actor=principal.actor)
    set_etag(response, "collection", collection.id, collection.version)
    return collection_read(collection, service.count_sheets(db, collection.id))


@router.post(
    "/collections/{collection_id}/sheets",
    response_model=UploadResult,
    status_code=201,
    responses={202: {"model": QueuedUploadResult}, 409: {}, 413: {}, 415: {}, 422: {}},
)
async def upload_sheets(
    collection_id: int,
    principal: Uploader,
    request: Request,
    files_in: Annotated[list[UploadFile], File(alias="files")],
    background: Annotated[bool, Query(description="queue decoding and tiling as jobs; answer 202 at once")] = False,
) -> Response:
    """Upload scans (parts named ``files``). Each file is accepted or refused on its own, with a reason.

    Decoding and tiling happen before any database write, so a refused file leaves no row and no stored file.
    When nothing is accepted, the answer carries the status of the first refusal (e.g. 415, 413, 409).
    With ``background=true`` the answer (202) comes once each original is stored: it lists one job per file
    (``/api/v1/jobs/{id}`` shows its progress; its result names the new sheets, its error why a file was refused).
    """
    state = app_state(request)
    if background:
        queued = await run_in_threadpool(ingest_job.queue_uploads, state, collection_id, principal.actor, files_in)
        return _upload_answer(queued.model_dump(mode="json"), bool(queued.queued), queued.refused, 202)
    result = await run_in_threadpool(ingest.ingest_uploads, state, collection_id, principal.actor, files_in)
    return _upload_answer(result.model_dump(mode="json"), bool(result.sheets), result.refused, 201)


def _upload_answer(body: dict[str, Any], accepted: bool, refused: list[RefusedFile], status: int) -> JSONResponse:
    if not accepted and refused:
        return JSONResponse({"detail": refused[0].reason, **body}, status_code=refused[0].status)
    return JSONResponse(body, status_code=status)


@router.get("/sheets", response_model=SheetPage)
def list_sheets(
    _: Reader,
    db: SessionDep,
    collection_id: int | None = None,
    q: Annotated[str | None, Query(max_length=200)] = None,
    status: str | None = None,
    limit: Annotated[int, Query(ge=1, le=service.MAX_PAGE)] = 50,
    cursor: Annotated[str | None, Query(max_length=200)] = None,
) -> SheetPage:
    items, next_cursor = service.list_sheets(
        db, collection_id=collection_id, q=q, status=status, limit=limit, cursor=cursor
    )
    return SheetPage(items=[sheet_read(item) for item in items], next_cursor=next_cursor)


@router.get("/sheets/{sheet_id}", response_model=SheetRead)
def get_sheet(sheet_id: int, _: Reader, db: SessionDep, response: Response) -> SheetRead:
    item = service.get_sheet(db, sheet_id)
    set_etag(response, "sheet", item.sheet.id, item.sheet.version)
    return sheet_read(item)


@router.patch("/sheets/{sheet_id}", response_model=SheetRead)
def update_sheet(
    sheet_id: int, body: SheetUpdate, principal: Editor, request: Request, db: SessionDep, response: Response
) -> SheetRead:
    item = service.get_sheet(db, sheet_id)
    require_if_match(request, "sheet", item.sheet.id, item.sheet.version)
    service.update_sheet(db, item.sheet, body, actor=principal.actor)
    set_etag(response, "sheet", item.sheet.id, item.sheet.version)
    return sheet_read(item)


@router.get("/sheets/{sheet_id}/original", response_class=Response, responses={200: {"content": {"*/*": {}}}})
def get_original(sheet_id: int, _: Reader, request: Request, db: SessionDep) -> Response:
    """The exact bytes that were uploaded (for a multi-page file: the whole file), checked against SHA-256."""
    item = service.get_sheet(db, sheet_id)
    return files.original_response(app_state(request).store, item)


@router.get("/sheets/{sheet_id}/thumbnail", response_class=Response, responses={200: {"content": {"image/jpeg": {}}}})
def get_thumbnail(sheet_id: int, _: Reader, request: Request, db: SessionDep) -> Response:
    item = service.get_sheet(db, sheet_id)
    return files.derived_response(app_state(request).store, item.sheet.derived_key, files.THUMBNAIL_NAME)


@router.get(
    "/sheets/{sheet_id}/tiles/{tile_path:path}",
    response_class=Response,
    responses={200: {"content": {"image/jpeg": {}, "application/xml": {}}}},
)
def get_tile(sheet_id: int, tile_path: str, _: Reader, request: Request, db: SessionDep) -> Response:
    """The deep-zoom pyramid: ``sheet.dzi`` and ``sheet_files/{level}/{col}_{row}.jpg``."""
    item = service.get_sheet(db, sheet_id)
    return files.tile_response(app_state(request).store, item.sheet.derived_key, tile_path)
