"""Submitting jobs and reading their state."""

from __future__ import annotations

import json
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor
from tracedesk.db import transaction
from tracedesk.errors import NotFound
from tracedesk.jobs.registry import handler_for
from tracedesk.jobs.schemas import JobRead
from tracedesk.models import Job
from tracedesk.web.state import AppState

MAX_LISTED = 100


def submit_job(state: AppState, kind: str, params: dict[str, Any], *, actor: Actor, max_attempts: int = 3) -> Job:
    """Record a queued job (committed, so any worker can see it), then hand it to the configured backend."""
    handler_for(kind)  # refuse unknown kinds before anything is stored
    with transaction(state.writer) as session:
        job = Job(kind=kind, params=json.dumps(params), created_by_id=actor.id, max_attempts=max_attempts)
        session.add(job)
        session.flush()
    state.dispatcher.dispatch(job.id)
    return job


def get_job(session: Session, job_id: int) -> Job:
    job = session.get(Job, job_id)
    if job is None:
        raise NotFound(f"no job with id {job_id}")
    return job


def jobs_of(session: Session, user_id: int | None) -> list[Job]:
    query = select(Job).order_by(Job.id.desc()).limit(MAX_LISTED)
    if user_id is not None:
        query = query.where(Job.created_by_id == user_id)
    return list(session.scalars(query))


def job_read(job: Job) -> JobRead:
    return JobRead(
        id=job.id,
        kind=job.kind,
        status=job.status,
        progress=job.progress,
        message=job.message,
        result=json.loads(job.result) if job.result else None,
        error=job.error,
        attempts=job.attempts,
        created_at=job.created_at,
        started_at=job.started_at,
        finished_at=job.finished_at,
    )
