"""Job kinds: each kind names a handler that computes without locks and finishes through ``JobContext.finish``."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from tracedesk.errors import Unprocessable
from tracedesk.jobs.context import JobContext

Handler = Callable[[JobContext], dict[str, Any]]
_HANDLERS: dict[str, Handler] = {}


def job_handler(kind: str) -> Callable[[Handler], Handler]:
    """Register ``function`` as the handler of jobs of ``kind``."""

    def register(function: Handler) -> Handler:
        _HANDLERS[kind] = function
        return function

    return register


def handler_for(kind: str) -> Handler:
    _load_handlers()
    try:
        return _HANDLERS[kind]
    except KeyError as error:
        raise Unprocessable(f"unknown job kind {kind!r}") from error


def known_kinds() -> list[str]:
    _load_handlers()
    return sorted(_HANDLERS)


def _load_handlers() -> None:
    # Handlers live beside their features; importing them registers them (kept here to avoid import cycles).
    from tracedesk.archive import ingest_job  # noqa: F401
    from tracedesk.digitizing import batch  # noqa: F401
    from tracedesk.exports import bundle_jobs  # noqa: F401
    from tracedesk.jobs import builtin_jobs  # noqa: F401
