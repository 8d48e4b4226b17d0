"""The decoder process: confines itself with resource limits, then decodes what the web process asks, one request
at a time (``python -m tracedesk.imaging.decoder_child``; started by `tracedesk.imaging.decoder_process`).

Confinement, before any byte of an upload is read: RLIMIT_AS (address space) is set to the session's memory
limit, soft and hard, so an allocation past it fails (Python raises MemoryError; PDFium and GLib abort the
process); RLIMIT_CORE is 0 so an aborted decoder leaves no core file the size of its memory. Before each request
the soft RLIMIT_CPU is set to the processor time used so far plus the request's allowance, so a runaway decode
is stopped by the kernel (SIGXCPU) even when the web process is gone and cannot enforce its wall-clock limit.

`serve` is generic (the tests run it with their own operations); `main` serves `decoder_tasks.OPERATIONS`.
Standard output is the protocol channel (`decoder_wire`), so file descriptor 1 is pointed at standard error
first: anything a library prints lands in the log instead of corrupting a frame.
"""

from __future__ import annotations

import math
import os
import resource
import sys
from collections.abc import Iterable, Mapping
from typing import Any

import pyvips

from tracedesk.imaging.decoder_tasks import OPERATIONS
from tracedesk.imaging.decoder_wire import Chunk, Operation, read_frame, write_frame
from tracedesk.imaging.errors import UploadRefused

_PROTOCOL_BROKEN = 3


def confine_memory(memory_bytes: int) -> None:
    """Cap this process's address space at `memory_bytes` for good (soft = hard) and disable core files."""
    resource.setrlimit(resource.RLIMIT_AS, (memory_bytes, memory_bytes))
    resource.setrlimit(resource.RLIMIT_CORE, (0, 0))


def allow_processor_time(seconds: float) -> None:
    """Let this process use `seconds` more of processor time (all threads) before the kernel stops it."""
    usage = resource.getrusage(resource.RUSAGE_SELF)
    soft = math.ceil(usage.ru_utime + usage.ru_stime + seconds)
    _, hard = resource.getrlimit(resource.RLIMIT_CPU)
    if hard != resource.RLIM_INFINITY:
        soft = min(soft, hard)
    resource.setrlimit(resource.RLIMIT_CPU, (soft, hard))


class _Request:
    """One request being answered: remembers whether the answer has started, since it cannot be taken back."""

    def __init__(self, out: int) -> None:
        self.out = out
        self.answered = False

    def respond(self, header: Mapping[str, Any], payload: Iterable[Chunk] = ()) -> None:
        if self.answered:
            raise RuntimeError("an operation answered twice")
        self.answered = True
        write_frame(self.out, header, payload)


def _answer(operations: Mapping[str, Operation], message: Mapping[str, Any], out: int) -> None:
    request = _Request(out)
    try:
        operation = operations[str(message.get("operation"))]
        operation(message.get("arguments") or {}, request.respond)
    except UploadRefused as refused:
        _answer_unless_started(request, {"refused": refused.code, "reason": refused.reason})
    except MemoryError:
        _answer_unless_started(request, {"out_of_memory": True})
    except Exception as exc:  # a bug: described to the web process, which logs it and answers 500
        _answer_unless_started(request, {"error": f"{type(exc).__name__}: {exc}"})
    if not request.answered:
        request.respond({})


def _answer_unless_started(request: _Request, header: Mapping[str, Any]) -> None:
    if request.answered:  # the failure came in the middle of a payload: only ending the session is honest
        os._exit(_PROTOCOL_BROKEN)
    request.respond(header)


def _protocol_output() -> int:
    """A private copy of standard output for frames; file descriptor 1 then points at standard error."""
    out = os.dup(1)
    os.dup2(2, 1)
    sys.stdout = sys.stderr
    return out


def serve(operations: Mapping[str, Operation]) -> None:
    """Answer requests on standard input until it closes, confined as the session's first frame asks."""
    out = _protocol_output()
    try:
        hello = read_frame(0)
        if hello is None:
            return  # a spare nobody needed
        confine_memory(int(hello["memory_bytes"]))
        write_frame(out, {"ready": True})
        while (message := read_frame(0)) is not None:
            allow_processor_time(float(message["cpu_seconds"]))
            _answer(operations, message, out)
    except BrokenPipeError:
        return  # the web process is gone (killed or stopped): nobody to answer


def main() -> None:
    """Serve the decoding operations."""
    # Each page is decoded once: libvips' operation cache would only keep finished pages alive.
    pyvips.cache_set_max(0)
    serve(OPERATIONS)


if __name__ == "__main__":
    main()
