"""What a running job's handler gets: the app state, its parameters, progress reporting, the final commit."""

from __future__ import annotations

import json
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy import update
from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor
from tracedesk.db import transaction
from tracedesk.models import Job
from tracedesk.models.base import utcnow
from tracedesk.web.state import AppState

PROGRESS_INTERVAL_S = 0.5
ResultWriter = Callable[[Session], dict[str, Any]]


class JobCancelled(Exception):
    """The job row was claimed by another worker or finished meanwhile; stop without writing."""


@dataclass
class JobContext:
    state: AppState
    job_id: int
    actor: Actor
    params: dict[str, Any]
    attempt: int
    _last_progress: float = field(default=0.0)

    def progress(self, fraction: float, message: str = "") -> None:
        """Record progress (0-1) in its own short transaction, at most twice a second; doubles as a heartbeat."""
        now = time.monotonic()
        if now - self._last_progress < PROGRESS_INTERVAL_S and fraction < 1.0:
            return
        self._last_progress = now
        with transaction(self.state.writer) as session:
            values: dict[str, Any] = {"progress": max(0.0, min(1.0, fraction)), "heartbeat_at": utcnow()}
            if message:
                values["message"] = message
            session.execute(update(Job).where(Job.id == self.job_id, Job.status == "running").values(**values))

    def finish(self, write: ResultWriter) -> dict[str, Any]:
        """Apply the job's effects and mark it succeeded in one transaction (all or nothing)."""
        with transaction(self.state.writer) as session:
            job = session.get(Job, self.job_id, with_for_update=True)
            if job is None or job.status != "running" or job.attempts != self.attempt:
                raise JobCancelled(f"job {self.job_id} is no longer this worker's to finish")
            result = write(session)
            job.status, job.progress, job.finished_at = "succeeded", 1.0, utcnow()
            job.result = json.dumps(result)
            return result
