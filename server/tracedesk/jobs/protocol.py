"""The one thing the web layer needs from a job backend: hand it a queued job's id."""

from __future__ import annotations

from typing import Protocol


class JobDispatcher(Protocol):
    name: str

    def dispatch(self, job_id: int) -> None:
        """Arrange for the queued job to run (in this process, or on a queue worker)."""
        ...

    def shutdown(self) -> None:
        """Stop accepting work; wait for running jobs where that is possible."""
        ...
