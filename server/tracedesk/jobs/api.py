"""JSON routes: a job's status and progress, and the caller's recent jobs."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends

from tracedesk.accounts.permissions import Permission
from tracedesk.errors import NotFound
from tracedesk.jobs import service
from tracedesk.jobs.schemas import JobRead
from tracedesk.web.deps import Principal, SessionDep, requires

router = APIRouter(prefix="/api/v1/jobs", tags=["jobs"])
Reader = Annotated[Principal, Depends(requires(Permission.READ))]


@router.get("", response_model=list[JobRead])
def my_jobs(principal: Reader, db: SessionDep) -> list[JobRead]:
    """Your latest jobs (admins: everyone's), newest first."""
    owner = None if principal.can(Permission.MANAGE_USERS) else principal.user.id
    return [service.job_read(job) for job in service.jobs_of(db, owner)]


@router.get("/{job_id}", response_model=JobRead)
def get_job(job_id: int, principal: Reader, db: SessionDep) -> JobRead:
    job = service.get_job(db, job_id)
    if job.created_by_id != principal.user.id and not principal.can(Permission.MANAGE_USERS):
        raise NotFound(f"no job with id {job_id}")
    return service.job_read(job)
