"""Ingest as a background job: the upload answers as soon as the original is stored; decoding and tiling follow.

The request keeps only what must happen while the bytes are at hand: receive the file in bounded memory, refuse
an exact duplicate, and put the original in the file store (verified by SHA-256). A job (in-process pool or an
RQ worker on another machine; both read the original back from the store) then decodes, tiles and writes the
rows, reporting progress per page. Its outcome is all or nothing like the synchronous path's: a refused file
fails the job with the reason and leaves no row and no derived folder; its original, if no row uses it, is
removed by the orphan sweep after its grace period (another upload of the same bytes may be about to use it).
"""

from __future__ import annotations

import json
import tempfile
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.archive.ingest import (
    IncomingFile,
    PreparedPage,
    ReceivedFile,
    examine_received,
    insert_rows,
    prepare_pages,
    receive_each,
    refuse_duplicate,
    undo_files,
)
from tracedesk.archive.schemas import QueuedFile, QueuedUploadResult
from tracedesk.audit.service import Actor
from tracedesk.errors import AppError
from tracedesk.imaging.errors import UploadRefused
from tracedesk.imaging.pages import UploadInfo
from tracedesk.jobs.context import JobContext
from tracedesk.jobs.registry import job_handler
from tracedesk.jobs.service import submit_job
from tracedesk.models import Job
from tracedesk.web.state import AppState

INGEST_KIND = "ingest_file"


def queue_received(state: AppState, collection_id: int, actor: Actor, received: ReceivedFile) -> QueuedFile:
    """Store the original and queue its ingest job. Raises Conflict for a duplicate, StorageError if storing fails."""
    refuse_duplicate(state, collection_id, received.sha256)
    state.store.put_file(received.path, expected_sha256=received.sha256)
    params = {
        "collection_id": collection_id,
        "sha256": received.sha256,
        "filename": received.filename,
        "media_type": received.media_type,
        "size": received.size,
    }
    job = submit_job(state, INGEST_KIND, params, actor=actor)
    return QueuedFile(filename=received.filename, job_id=job.id)


def queue_uploads(
    state: AppState, collection_id: int, actor: Actor, incoming: Iterable[IncomingFile]
) -> QueuedUploadResult:
    """Receive each part and queue its ingest; refusals found before queuing (size, duplicate) are listed."""

    def accept(received: ReceivedFile) -> QueuedFile:
        return queue_received(state, collection_id, actor, received)

    queued, refused = receive_each(state, collection_id, incoming, accept)
    return QueuedUploadResult(queued=queued, refused=refused)


def pending_ingest_keys(session: Session) -> set[str]:
    """Originals that queued or running ingest jobs will read: the orphan sweep must keep them however old."""
    params = session.scalars(select(Job.params).where(Job.kind == INGEST_KIND, Job.status.in_(("queued", "running"))))
    return {str(json.loads(text)["sha256"]) for text in params}


def _refused(error: UploadRefused) -> AppError:
    """The file's reason for refusal as the job's error (a user error, not a fault of the worker)."""
    return AppError.with_status(error.http_status, error.reason, code=error.code)


@job_handler(INGEST_KIND)
def ingest_file_job(context: JobContext) -> dict[str, Any]:
    """params: {"collection_id", "sha256", "filename", "media_type", "size"}; result: {"sheet_ids": [...]}."""
    state, params = context.state, context.params
    collection_id = int(params["collection_id"])
    incoming = state.settings.data_dir / "incoming"
    incoming.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(dir=incoming, prefix="job-") as folder:
        context.progress(0.02, "reading the original back from the store")
        path = state.store.copy_verified(str(params["sha256"]), Path(folder) / "original")
        received = ReceivedFile(
            path, str(params["filename"]), params["media_type"], str(params["sha256"]), int(params["size"])
        )
        try:
            info = examine_received(state, received)
        except UploadRefused as error:
            raise _refused(error) from error
        context.progress(0.05, f"decoding and tiling {info.page_count} page(s)")
        pages = _prepare(context, info, received)
        try:
            for page in pages:
                page.staging.publish()

            def write(session: Session) -> dict[str, Any]:
                created = insert_rows(session, collection_id, context.actor, received, info, pages)
                return {"sheet_ids": [item.sheet.id for item in created], "filename": received.filename}

            return context.finish(write)
        except BaseException:
            for page in pages:
                page.staging.discard()
            undo_files(state.store, pages)
            raise


def _prepare(context: JobContext, info: UploadInfo, received: ReceivedFile) -> list[PreparedPage]:
    def report(done: int, total: int) -> None:
        context.progress(0.05 + 0.85 * done / max(total, 1), f"tiled page {done} of {total}")

    try:
        return prepare_pages(context.state.store, info, received, progress=report)
    except UploadRefused as error:
        raise _refused(error) from error
