"""Turning uploaded files into sheets: receive, examine, decode and tile, store, then write rows.

Order matters for "all or nothing": every expensive and fallible step (decoding, tiling, storing the original)
happens before the database transaction; the rows are written last, in one transaction per file, and if that
fails the files it would have referenced are removed again (the orphan sweep catches anything a crash leaves).
"""

from __future__ import annotations

import contextlib
import json
import tempfile
import uuid
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Protocol, TypeVar

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from tracedesk.archive.files import NORMALISED_NAME, PYRAMID_BASENAME, SOURCE_NAME, THUMBNAIL_NAME
from tracedesk.archive.schemas import RefusedFile, UploadResult
from tracedesk.archive.service import SheetWithSource, get_collection
from tracedesk.archive.views import sheet_read
from tracedesk.audit.service import Actor, created_fields, record_event
from tracedesk.config import Settings
from tracedesk.db import transaction
from tracedesk.errors import AppError, Conflict, PayloadTooLarge
from tracedesk.imaging.errors import UploadRefused
from tracedesk.imaging.formats import ImageFormat
from tracedesk.imaging.limits import DecodeLimits
from tracedesk.imaging.normalise import NormalisedSheet, save_normalised
from tracedesk.imaging.pages import UploadInfo, examine_upload, iter_sheets
from tracedesk.imaging.pyramid import save_pyramid, save_thumbnail
from tracedesk.models import Sheet, SourceFile
from tracedesk.storage import DerivedStaging, FileStore, StorageError, sha256_of_file
from tracedesk.storage.durable import storage_error_from
from tracedesk.web.state import AppState

RECEIVE_CHUNK = 1 << 20
MAX_FILENAME = 255
INSERT_ATTEMPTS = 3
PageProgress = Callable[[int, int], None]
T = TypeVar("T")


class IncomingFile(Protocol):
    """What an upload part offers (Starlette's UploadFile has these)."""

    @property
    def filename(self) -> str | None: ...

    @property
    def content_type(self) -> str | None: ...

    @property
    def file(self) -> IO[bytes]: ...


@dataclass(frozen=True)
class ReceivedFile:
    path: Path
    filename: str
    media_type: str | None
    sha256: str
    size: int


def clean_filename(raw: str | None) -> str:
    """The user's file name as metadata only: last path component, no control characters, bounded length."""
    name = (raw or "").replace("\\", "/").split("/")[-1]
    name = "".join(ch for ch in name if ch.isprintable() and ch not in "\x00")
    return name.strip()[:MAX_FILENAME] or "unnamed"


def receive(incoming: IncomingFile, folder: Path, *, max_bytes: int) -> ReceivedFile:
    """Copy an upload part to a private temp file in bounded memory, refusing it past ``max_bytes``."""
    folder.mkdir(parents=True, exist_ok=True)
    handle = tempfile.NamedTemporaryFile(dir=folder, prefix="upload-", delete=False)  # noqa: SIM115
    path = Path(handle.name)
    size = 0
    try:
        with handle:
            while chunk := incoming.file.read(RECEIVE_CHUNK):
                size += len(chunk)
                if size > max_bytes:
                    raise PayloadTooLarge(f"the file is larger than the limit of {max_bytes / 2**20:g} MiB")
                handle.write(chunk)
    except OSError as exc:  # e.g. the disk filled up: 507 with a message, not a bare 500
        path.unlink(missing_ok=True)
        raise storage_error_from(exc, action="receiving the upload") from exc
    except BaseException:
        path.unlink(missing_ok=True)
        raise
    return ReceivedFile(path, clean_filename(incoming.filename), incoming.content_type, sha256_of_file(path), size)


def _existing_duplicate(session: Session, collection_id: int, sha256: str) -> Sheet | None:
    return session.scalar(
        select(Sheet)
        .join(SourceFile, SourceFile.id == Sheet.source_file_id)
        .where(Sheet.collection_id == collection_id, SourceFile.sha256 == sha256)
        .order_by(Sheet.id)
        .limit(1)
    )


def refuse_duplicate(state: AppState, collection_id: int, sha256: str) -> None:
    """Refuse (409, naming the sheet) a file whose exact bytes are already in the collection."""
    with transaction(state.reader) as session:
        duplicate = _existing_duplicate(session, collection_id, sha256)
        if duplicate is not None:
            raise _duplicate_error(duplicate)


def examine_received(state: AppState, received: ReceivedFile) -> UploadInfo:
    """Identify the file by its content and check it against the decoding limits (UploadRefused if not)."""
    settings = state.settings
    return examine_upload(
        received.path,
        declared_name=received.filename,
        declared_media_type=received.media_type,
        limits=decode_limits(settings),
        pdf_dpi=settings.pdf_dpi,
    )


def decode_limits(settings: Settings) -> DecodeLimits:
    """The decoding limits the settings ask for (uploads, and stored originals decoded again)."""
    return DecodeLimits(
        max_file_bytes=settings.max_upload_bytes,
        max_pixels_per_page=settings.max_pixels_per_page,
        max_pages=settings.max_pages_per_file,
        max_decode_seconds=settings.decode_timeout_seconds,
        max_decode_memory_bytes=settings.decode_memory_mib * 2**20,
        max_file_decode_seconds=settings.decode_file_seconds,
        max_parallel_decodes=settings.decode_parallel,
    )


def _duplicate_error(existing: Sheet) -> Conflict:
    page = f", page {existing.page_index + 1}" if existing.page_index else ""
    return Conflict(
        f"this exact file is already in the collection as sheet #{existing.id} ({existing.filename}{page})",
        detail={"existing_sheet_id": existing.id},
    )


def _write_derived(sheet: NormalisedSheet, folder: Path, *, info: UploadInfo, received: ReceivedFile) -> None:
    """Thumbnail, tile pyramid, a pointer to the original, and the rendered image of PDF pages only.

    Raster pages are decoded again from the original when their pixels are needed (see
    ``digitizing/sheet_image.py``); a PDF page's rendering is kept, since another renderer could move pixels.
    """
    if info.image_format is ImageFormat.PDF:
        save_normalised(sheet, folder / NORMALISED_NAME)
    source = {
        "sha256": received.sha256,
        "page_index": sheet.page_index,
        "filename": received.filename,
        "media_type": info.media_type,
    }
    (folder / SOURCE_NAME).write_text(json.dumps(source), encoding="utf-8")
    save_thumbnail(sheet, folder / THUMBNAIL_NAME)
    save_pyramid(sheet, folder, basename=PYRAMID_BASENAME)


@dataclass
class PreparedPage:
    derived_key: str
    width: int
    height: int
    dpi: float | None
    page_index: int
    staging: DerivedStaging


def prepare_pages(
    store: FileStore, info: UploadInfo, received: ReceivedFile, progress: PageProgress | None = None
) -> list[PreparedPage]:
    """Decode, normalise and tile every page into staging folders; all of them, or none (the rest discarded).

    ``progress(done, total)`` is called after each page (for a job's progress bar).
    """
    prepared: list[PreparedPage] = []
    try:
        for page in iter_sheets(info):
            key = f"sheet-{uuid.uuid4().hex}"
            staging = store.stage_derived(key)
            prepared.append(
                PreparedPage(key, page.width, page.height, page.dpi[0] if page.dpi else None, page.page_index, staging)
            )
            _write_derived(page, staging.path, info=info, received=received)
            if progress is not None:
                progress(len(prepared), info.page_count)
    except BaseException as exc:
        for item in prepared:
            item.staging.discard()
        if isinstance(exc, OSError):
            raise storage_error_from(exc, action="writing the sheet's images") from exc
        raise
    return prepared


def insert_rows(
    session: Session,
    collection_id: int,
    actor: Actor,
    received: ReceivedFile,
    info: UploadInfo,
    pages: list[PreparedPage],
) -> list[SheetWithSource]:
    duplicate = _existing_duplicate(session, collection_id, received.sha256)
    if duplicate is not None:  # another upload of the same file won the race
        raise _duplicate_error(duplicate)
    source = session.scalar(select(SourceFile).where(SourceFile.sha256 == received.sha256))
    if source is None:
        source = SourceFile(
            sha256=received.sha256, size_bytes=received.size, media_type=info.media_type, page_count=info.page_count
        )
        session.add(source)
        session.flush()
    created = []
    for page in pages:
        sheet = Sheet(
            collection_id=collection_id,
            source_file_id=source.id,
            page_index=page.page_index,
            filename=received.filename,
            width=page.width,
            height=page.height,
            dpi=page.dpi,
            status="ready",
            derived_key=page.derived_key,
            created_by_id=actor.id,
        )
        session.add(sheet)
        session.flush()
        values = {
            "collection_id": collection_id,
            "filename": sheet.filename,
            "page_index": sheet.page_index,
            "sha256": source.sha256,
            "width": sheet.width,
            "height": sheet.height,
        }
        record_event(
            session,
            actor=actor,
            action="create",
            entity_type="sheet",
            entity_id=sheet.id,
            entity_version=sheet.version,
            changes=created_fields(values),
        )
        created.append(SheetWithSource(sheet, source))
    return created


def undo_files(store: FileStore, pages: list[PreparedPage]) -> None:
    """Remove this upload's own derived folders. The original is left to the orphan sweep: another upload of
    the same bytes may be using it at this moment (a row it is about to write, or one a concurrent winner just
    wrote), and only the sweep's grace period makes removing it safe."""
    for page in pages:
        with contextlib.suppress(StorageError, OSError):
            store.delete_derived(page.derived_key)


def _record_rows(
    state: AppState,
    collection_id: int,
    actor: Actor,
    received: ReceivedFile,
    info: UploadInfo,
    pages: list[PreparedPage],
) -> list[SheetWithSource]:
    """Write the rows; when a concurrent upload of the same bytes committed first (PostgreSQL reports it as a
    unique-key violation), try again: the next attempt sees its rows (a duplicate, or a shared original)."""
    for attempt in range(INSERT_ATTEMPTS):
        try:
            with transaction(state.writer) as session:
                return insert_rows(session, collection_id, actor, received, info, pages)
        except IntegrityError:
            if attempt + 1 == INSERT_ATTEMPTS:
                raise
    raise AssertionError("unreachable")


def ingest_received(state: AppState, collection_id: int, actor: Actor, received: ReceivedFile) -> list[SheetWithSource]:
    """Examine, tile, store and record one received file. Raises AppError / UploadRefused / StorageError."""
    refuse_duplicate(state, collection_id, received.sha256)
    info = examine_received(state, received)
    pages = prepare_pages(state.store, info, received)
    try:
        state.store.put_file(received.path, expected_sha256=received.sha256)
        for page in pages:
            page.staging.publish()
        return _record_rows(state, collection_id, actor, received, info, pages)
    except BaseException:
        for page in pages:
            page.staging.discard()
        undo_files(state.store, pages)
        raise


def _refusal(filename: str, error: Exception) -> RefusedFile:
    if isinstance(error, UploadRefused):
        return RefusedFile(filename=filename, reason=error.reason, status=error.http_status)
    if isinstance(error, AppError):
        return RefusedFile(filename=filename, reason=error.message, status=error.status_code)
    if isinstance(error, StorageError):
        return RefusedFile(filename=filename, reason=str(error), status=error.http_status)
    raise error


def receive_each(
    state: AppState, collection_id: int, incoming: Iterable[IncomingFile], accept: Callable[[ReceivedFile], T]
) -> tuple[list[T], list[RefusedFile]]:
    """Receive each upload part and hand it to ``accept``; refusing one file (with its reason) never stops the
    others. The received temp file is removed afterwards whatever happened."""
    with transaction(state.reader) as session:
        get_collection(session, collection_id)
    incoming_dir = state.settings.data_dir / "incoming"
    accepted: list[T] = []
    refused: list[RefusedFile] = []
    for part in incoming:
        filename = clean_filename(part.filename)
        try:
            received = receive(part, incoming_dir, max_bytes=state.settings.max_upload_bytes)
        except (AppError, StorageError) as error:
            refused.append(_refusal(filename, error))
            continue
        try:
            accepted.append(accept(received))
        except (UploadRefused, AppError, StorageError) as error:
            refused.append(_refusal(filename, error))
        finally:
            received.path.unlink(missing_ok=True)
    return accepted, refused


def ingest_uploads(state: AppState, collection_id: int, actor: Actor, incoming: Iterable[IncomingFile]) -> UploadResult:
    """Accept or refuse each uploaded file on its own; the answer lists both, with reasons."""

    def accept(received: ReceivedFile) -> list[SheetWithSource]:
        return ingest_received(state, collection_id, actor, received)

    groups, refused = receive_each(state, collection_id, incoming, accept)
    return UploadResult(sheets=[sheet_read(item) for group in groups for item in group], refused=refused)
