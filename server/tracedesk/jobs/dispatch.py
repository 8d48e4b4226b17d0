"""Job backends: a thread pool inside the web process (default), or RQ on Redis with `tracedesk worker`."""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from typing import TYPE_CHECKING

from tracedesk.jobs.protocol import JobDispatcher

if TYPE_CHECKING:
    from tracedesk.web.state import AppState

RQ_JOB_TIMEOUT_S = 2 * 60 * 60


class InProcessDispatcher:
    """Runs jobs on a small pool of threads of this process: no extra server needed."""

    name = "inprocess"

    def __init__(self, state: AppState, *, threads: int = 2) -> None:
        self._state = state
        self._pool = ThreadPoolExecutor(max_workers=threads, thread_name_prefix="tracedesk-job")

    def dispatch(self, job_id: int) -> None:
        from tracedesk.jobs.execute import run_job

        self._pool.submit(run_job, self._state, job_id)

    def shutdown(self) -> None:
        self._pool.shutdown(wait=True)


class RqDispatcher:
    """Puts job ids on an RQ queue in Redis; any number of `tracedesk worker` processes run them."""

    name = "rq"

    def __init__(self, redis_url: str, queue_name: str) -> None:
        from redis import Redis
        from rq import Queue

        self.connection = Redis.from_url(redis_url)
        self.queue = Queue(queue_name, connection=self.connection)

    def dispatch(self, job_id: int) -> None:
        self.queue.enqueue(
            "tracedesk.jobs.worker.run_queued_job",
            job_id,
            job_timeout=RQ_JOB_TIMEOUT_S,
            job_id=f"tracedesk-{job_id}-{_suffix()}",
        )

    def shutdown(self) -> None:
        self.connection.close()


def _suffix() -> str:
    import secrets

    return secrets.token_hex(4)


def build_dispatcher(state: AppState) -> JobDispatcher:
    settings = state.settings
    if settings.job_backend == "rq":
        if not settings.redis_url:
            raise ValueError("TRACEDESK_REDIS_URL must be set when TRACEDESK_JOB_BACKEND is rq")
        return RqDispatcher(settings.redis_url, settings.rq_queue)
    return InProcessDispatcher(state, threads=settings.job_threads)
