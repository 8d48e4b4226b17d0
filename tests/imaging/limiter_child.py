"""A decoder process with operations that misbehave on purpose, for the tests of the limits (run as a script).

It serves through `tracedesk.imaging.decoder_child.serve`, the loop the real decoder uses, so the confinement
and the protocol under test are the real ones; only the work differs.
"""

from __future__ import annotations

import os
import resource
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from tracedesk.imaging.decoder_child import allow_processor_time, serve
from tracedesk.imaging.decoder_wire import Operation, Respond
from tracedesk.imaging.errors import TooManyPixels

MIB = 2**20


def _spin(arguments: Mapping[str, Any], respond: Respond) -> None:
    while True:
        pass


def _spin_past_processor_time(arguments: Mapping[str, Any], respond: Respond) -> None:
    allow_processor_time(0.0)  # at most a second left: the kernel's SIGXCPU comes before any wall-clock limit
    _spin(arguments, respond)


def _allocate(arguments: Mapping[str, Any], respond: Respond) -> None:
    held = b"\x01" * (int(arguments["mebibytes"]) * MIB)  # written, so resident, not merely reserved
    respond({"held": len(held)}, ())


def _fill_then_abort(arguments: Mapping[str, Any], respond: Respond) -> None:
    """Hold memory, then abort as PDFium and GLib do when an allocation fails."""
    held = b"\x01" * (int(arguments["mebibytes"]) * MIB)
    assert held
    os.abort()


def _limits(arguments: Mapping[str, Any], respond: Respond) -> None:
    usage = resource.getrusage(resource.RUSAGE_SELF)
    respond(
        {
            "address_space": resource.getrlimit(resource.RLIMIT_AS),
            "core": resource.getrlimit(resource.RLIMIT_CORE),
            "processor": resource.getrlimit(resource.RLIMIT_CPU),
            "processor_used": usage.ru_utime + usage.ru_stime,
            "pid": os.getpid(),
            "environment": {name: os.environ.get(name) for name in ("OPENBLAS_NUM_THREADS", "MALLOC_ARENA_MAX")},
        },
        (),
    )


def _pixels(arguments: Mapping[str, Any], respond: Respond) -> None:
    size = int(arguments["bytes"])
    data = bytes(index % 251 for index in range(size))
    respond({"payload_bytes": size}, [data[: size // 2], data[size // 2 :]])


def _meet(arguments: Mapping[str, Any], respond: Respond) -> None:
    """Leave a mark in a shared folder, then wait up to ``wait_seconds`` for ``expected`` marks (this one's
    included): the requests met only if they ran at the same time. The clock is CLOCK_MONOTONIC, which all
    processes of the machine share (clock_gettime(2)), so the stamps of two children compare."""
    started = time.monotonic()
    folder = Path(arguments["folder"])
    (folder / str(os.getpid())).touch()
    deadline = started + float(arguments["wait_seconds"])
    met = False
    while not met and time.monotonic() < deadline:
        met = len(list(folder.iterdir())) >= int(arguments["expected"])
        time.sleep(0.01)
    respond({"met": met, "started": started, "ended": time.monotonic()}, ())


def _refuse(arguments: Mapping[str, Any], respond: Respond) -> None:
    raise TooManyPixels("the page is far too large")


def _fail(arguments: Mapping[str, Any], respond: Respond) -> None:
    raise ValueError("a bug in an operation")


OPERATIONS: dict[str, Operation] = {
    "spin": _spin,
    "spin_past_processor_time": _spin_past_processor_time,
    "allocate": _allocate,
    "fill_then_abort": _fill_then_abort,
    "limits": _limits,
    "pixels": _pixels,
    "meet": _meet,
    "refuse": _refuse,
    "fail": _fail,
}

if __name__ == "__main__":
    serve(OPERATIONS)
