"""Running one job: claim it atomically, run its handler, record success or failure; recover stale jobs."""

from __future__ import annotations

import json
import logging
import traceback
from datetime import timedelta
from typing import Any, cast

from sqlalchemy import CursorResult, select, update
from sqlalchemy.orm import Session

from tracedesk.audit.service import SYSTEM, Actor
from tracedesk.db import transaction
from tracedesk.errors import AppError
from tracedesk.jobs.context import JobCancelled, JobContext
from tracedesk.jobs.registry import handler_for
from tracedesk.models import Job, User
from tracedesk.models.base import utcnow
from tracedesk.science.errors import ScienceInputError
from tracedesk.web.state import AppState

log = logging.getLogger("tracedesk.jobs")
STALE_AFTER = timedelta(minutes=2)
USER_ERRORS = (AppError, ScienceInputError)


def _claim(state: AppState, job_id: int) -> JobContext | None:
    """Move a queued job to running (one worker wins); None when it is not queued any more."""
    with transaction(state.writer) as session:
        now = utcnow()
        outcome = session.execute(
            update(Job)
            .where(Job.id == job_id, Job.status == "queued")
            .values(status="running", attempts=Job.attempts + 1, started_at=now, heartbeat_at=now, error=None)
        )
        claimed = cast(CursorResult[Any], outcome).rowcount
        if not claimed:
            return None
        job = session.get(Job, job_id)
        assert job is not None
        return JobContext(state, job_id, _actor(session, job.created_by_id), json.loads(job.params), job.attempts)


def _actor(session: Session, user_id: int | None) -> Actor:
    user = session.get(User, user_id) if user_id is not None else None
    return Actor(user.id, user.display_name) if user else SYSTEM


def _fail(state: AppState, job_id: int, attempt: int, message: str) -> None:
    with transaction(state.writer) as session:
        session.execute(
            update(Job)
            .where(Job.id == job_id, Job.status == "running", Job.attempts == attempt)
            .values(status="failed", error=message[:4000], finished_at=utcnow())
        )


def run_job(state: AppState, job_id: int) -> dict[str, Any] | None:
    """Run a queued job to its end in this process. Returns its result, or None if it failed or was not queued."""
    context = _claim(state, job_id)
    if context is None:
        return None
    with transaction(state.reader) as session:
        kind = session.scalar(select(Job.kind).where(Job.id == job_id)) or ""
    try:
        return handler_for(kind)(context)
    except JobCancelled:
        return None
    except USER_ERRORS as error:
        _fail(state, job_id, context.attempt, str(getattr(error, "message", error)))
    except Exception as error:  # a bug or an outage: record it on the job instead of losing it
        log.exception("job failed", extra={"fields": {"job_id": job_id, "kind": kind}})
        _fail(state, job_id, context.attempt, f"{type(error).__name__}: {error}\n{traceback.format_exc(limit=5)}")
    return None


def recover_stale_jobs(state: AppState, *, stale_after: timedelta = STALE_AFTER) -> list[int]:
    """Jobs whose worker died (running, no heartbeat for ``stale_after``): re-queue, or fail after the last try.

    Returns the ids put back in the queue (the caller dispatches them again).
    """
    cutoff = utcnow() - stale_after
    requeued: list[int] = []
    with transaction(state.writer) as session:
        stale = session.scalars(select(Job).where(Job.status == "running", Job.heartbeat_at < cutoff)).all()
        for job in stale:
            if job.attempts < job.max_attempts:
                job.status, job.progress, job.message = "queued", 0.0, "re-queued after its worker stopped"
                requeued.append(job.id)
            else:
                job.status, job.finished_at = "failed", utcnow()
                job.error = f"its worker stopped {job.attempts} times; giving up"
    return requeued
