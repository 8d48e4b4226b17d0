"""The queue worker side: `tracedesk worker` runs RQ workers whose jobs call `run_queued_job`."""

from __future__ import annotations

from functools import cache
from typing import Any

from tracedesk.jobs.execute import recover_stale_jobs, run_job
from tracedesk.web.state import AppState


@cache
def worker_state() -> AppState:
    """One app state per worker process, built from the environment like the web service's."""
    from tracedesk.app import build_state
    from tracedesk.config import Settings

    return build_state(Settings(), migrate=False)


def run_queued_job(job_id: int) -> dict[str, Any] | None:
    """Entry point RQ calls with a job id."""
    return run_job(worker_state(), job_id)


def requeue_stale(state: AppState) -> list[int]:
    """Put jobs of dead workers back on the queue (called when a worker starts and between jobs)."""
    from tracedesk.jobs.dispatch import build_dispatcher

    ids = recover_stale_jobs(state)
    dispatcher = build_dispatcher(state)
    for job_id in ids:
        dispatcher.dispatch(job_id)
    return ids
