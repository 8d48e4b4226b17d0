"""The collection bundle as a background job: built with a progress bar, stored, downloaded later.

Small selections are also served while the request waits (``GET .../bundle.zip``, at most ``SYNC_MAX_SHEETS``
sheets); any selection up to ``MAX_SELECTED`` sheets can be made by a job (``POST .../bundles``).

The job builds the ZIP into the data folder's ``incoming/`` (which ``tracedesk sweep`` clears of leftovers after a
crash), puts it into the file store under its SHA-256, and then, in the one transaction that marks the job
succeeded, records the export in the audit trail. If anything fails the temporary file is removed, and a stored
file whose job could not be marked succeeded is deleted again, so a failed job leaves no file behind. The job's
result names the stored file; the file is kept for ``BUNDLE_KEEP`` (the orphan sweep keeps it that long, then
removes it like any file no row references) and downloads answer 410 after that.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.archive.service import get_collection
from tracedesk.audit.service import Actor
from tracedesk.db import transaction
from tracedesk.errors import AppError, Conflict, NotFound
from tracedesk.exports.bundle import BundleOptions, BundleResult, build_bundle
from tracedesk.exports.recording import export_event
from tracedesk.exports.selection import collection_sheets
from tracedesk.jobs.context import JobContext
from tracedesk.jobs.registry import job_handler
from tracedesk.jobs.service import submit_job
from tracedesk.models import Job
from tracedesk.models.base import utcnow
from tracedesk.storage import StoredObject
from tracedesk.web.state import AppState

BUNDLE_JOB = "collection_bundle"
# A 7000 x 5000 px scan costs 2.4 s of CPU (plus its decoding) and took 5-9 s of wall time on a busy 2-core machine
# to bundle at the default 4000 px picture (`python -m bench.bench_bundle`): five keep a waiting request well
# under a minute; more go through the job.
SYNC_MAX_SHEETS = 5
BUNDLE_KEEP = timedelta(days=14)
BUILD_SHARE = 0.95  # of the progress bar: building the ZIP; storing it takes the rest
LISTED = 20


class BundleGone(AppError):
    status_code = 410
    code = "gone"


@dataclass(frozen=True)
class StoredBundle:
    """A finished bundle job's file: its store key (the SHA-256 of the ZIP), download name and size (bytes)."""

    job_id: int
    collection_id: int
    key: str
    filename: str
    size: int


def bundle_filename(collection_id: int, job_id: int | None = None) -> str:
    return f"collection-{collection_id}-bundle{f'-{job_id}' if job_id else ''}.zip"


def download_path(job_id: int) -> str:
    return f"/api/v1/bundles/{job_id}/bundle.zip"


def start_bundle_job(
    state: AppState, collection_id: int, sheet_ids: list[int] | None, options: BundleOptions, *, actor: Actor
) -> Job:
    """Check the selection now (404/422 before anything is queued), then queue the job with the sheets it names
    at this moment, so the bundle holds exactly the sheets the request saw."""
    with transaction(state.reader) as session:
        ids = [sheet.id for sheet in collection_sheets(session, collection_id, sheet_ids)]
    params = {
        "collection_id": collection_id,
        "sheet_ids": ids,
        "options": {"step": options.step, "period_hours": options.period_hours, "image_side": options.max_image_side},
    }
    return submit_job(state, BUNDLE_JOB, params, actor=actor)


def _options(params: dict[str, Any]) -> BundleOptions:
    given = params["options"]
    step = given.get("step")
    return BundleOptions(
        step=None if step is None else float(step),
        period_hours=float(given["period_hours"]),
        max_image_side=int(given["image_side"]),
    )


def _build(context: JobContext) -> BundleResult:
    """The ZIP in a temporary file of the data folder, built from one read transaction (one consistent view)."""
    state, params = context.state, context.params
    with transaction(state.reader) as session:
        collection = get_collection(session, int(params["collection_id"]))
        sheets = collection_sheets(session, collection.id, [int(i) for i in params["sheet_ids"]])
        return build_bundle(
            session,
            state.store,
            collection,
            sheets,
            generated_by=context.actor.name,
            options=_options(params),
            progress=lambda fraction, message: context.progress(BUILD_SHARE * fraction, message),
            folder=state.settings.data_dir / "incoming",
            job={"id": context.job_id, "attempt": context.attempt},
        )


def _store(context: JobContext, built: BundleResult) -> StoredObject:
    context.progress(BUILD_SHARE, "storing the bundle")
    try:
        return context.state.store.put_file(built.path, expected_sha256=built.sha256)
    finally:
        built.path.unlink(missing_ok=True)


@job_handler(BUNDLE_JOB)
def bundle_job(context: JobContext) -> dict[str, Any]:
    """params: {"collection_id", "sheet_ids", "options"}; result: the stored file (key, name, size, SHA-256),
    its sheets, the traces left out with the reason, and where to download it."""
    collection_id = int(context.params["collection_id"])
    built = _build(context)
    stored = _store(context, built)
    result = {
        "collection_id": collection_id,
        "key": stored.key,
        "file": bundle_filename(collection_id, context.job_id),
        "bytes": stored.size,
        "sha256": built.sha256,
        "sheets": built.sheet_ids,
        "skipped": built.skipped,
        "download": download_path(context.job_id),
    }
    details = {name: result[name] for name in ("file", "bytes", "sha256", "sheets")}
    details |= {"format": "bundle.zip", "stage": "built", "job": context.job_id, "options": context.params["options"]}

    def write(session: Session) -> dict[str, Any]:
        export_event(session, context.actor, entity_type="collection", entity_id=collection_id, details=details)
        return result

    try:
        return context.finish(write)
    except BaseException:
        context.state.store.delete(stored.key)  # unique to this attempt (provenance.json names it)
        raise


def visible_bundle_job(session: Session, job_id: int, *, viewer_id: int, sees_all: bool) -> Job:
    """The bundle job if the viewer started it (or may see everyone's); 404 otherwise, so ids reveal nothing."""
    job = session.get(Job, job_id)
    if job is None or job.kind != BUNDLE_JOB or (job.created_by_id != viewer_id and not sees_all):
        raise NotFound(f"no bundle with job id {job_id}")
    return job


def first_line(text: str | None) -> str:
    """The message of a job's error without the traceback an unexpected failure records below it."""
    lines = (text or "").strip().splitlines()
    return lines[0] if lines else "no reason was recorded"


def expired(job: Job, *, now: datetime | None = None) -> bool:
    return job.finished_at is None or job.finished_at < (now or utcnow()) - BUNDLE_KEEP


def stored_bundle(session: Session, job_id: int, *, viewer_id: int, sees_all: bool) -> StoredBundle:
    """The finished bundle of a job: 404 if not the viewer's, 409 while running or after a failure, 410 expired."""
    job = visible_bundle_job(session, job_id, viewer_id=viewer_id, sees_all=sees_all)
    if job.status in {"queued", "running"}:
        raise Conflict(f"the bundle is not ready yet ({job.progress:.0%} done); download it once its job succeeded")
    if job.status != "succeeded" or not job.result:
        raise Conflict(f"the bundle was not made: {first_line(job.error)}")
    if expired(job):
        raise BundleGone(f"bundles are kept for {BUNDLE_KEEP.days} days and this one has been removed: build it again")
    result = json.loads(job.result)
    return StoredBundle(job.id, int(result["collection_id"]), str(result["key"]), str(result["file"]), result["bytes"])


def bundle_view(session: Session, job: Job) -> dict[str, Any]:
    """What the pages show of a bundle job: the job, its collection, how many sheets, the result once stored."""
    params = json.loads(job.params)
    return {
        "job": job,
        "collection": get_collection(session, int(params["collection_id"])),
        "sheet_count": len(params["sheet_ids"]),
        "result": json.loads(job.result) if job.result else None,
        "expired": job.status == "succeeded" and expired(job),
        "error": first_line(job.error) if job.status == "failed" else "",
        "download": download_path(job.id),
    }


def recent_bundle_jobs(session: Session, collection_id: int, *, viewer_id: int, sees_all: bool) -> list[Job]:
    """The latest bundle jobs of a collection started by the viewer (admins: by anyone), newest first; looked for
    among the viewer's latest 200 bundle jobs of any collection (the collection is in the job's JSON params)."""
    query = select(Job).where(Job.kind == BUNDLE_JOB).order_by(Job.id.desc()).limit(10 * LISTED)
    if not sees_all:
        query = query.where(Job.created_by_id == viewer_id)
    jobs = [job for job in session.scalars(query) if json.loads(job.params).get("collection_id") == collection_id]
    return jobs[:LISTED]


def kept_bundle_keys(session: Session, *, now: datetime | None = None) -> set[str]:
    """Store keys of the bundles still kept (finished within ``BUNDLE_KEEP``), for the orphan sweep."""
    cutoff = (now or utcnow()) - BUNDLE_KEEP
    query = select(Job.result).where(Job.kind == BUNDLE_JOB, Job.status == "succeeded", Job.finished_at >= cutoff)
    return {str(json.loads(text)["key"]) for text in session.scalars(query) if text}
