"""Decoding in a child process with a time limit and a memory limit, so no upload can stall or exhaust the server.

A `DecoderProcess` takes a fresh ``python -m tracedesk.imaging.decoder_child`` on first use (`decoder_launch`)
and sends it requests one at a time (`decoder_wire`). The child confines itself before it reads any upload (see
`decoder_child`):

* memory: RLIMIT_AS = `DecodeLimits.max_decode_memory_bytes`, so a decompression bomb fails its allocation
  inside the child; the web process only ever holds the finished page's pixels (width x height x 3 bytes, which
  the page caps bound);
* time: each request has `DecodeLimits.max_decode_seconds` of wall-clock time, after which the web process kills
  the child with SIGKILL; the child's processor time is capped as well (that allowance times the number of cores,
  since libvips decodes with several threads), which stops it even if the web process is gone;
* time per file: the requests of one `DecoderProcess` (one upload's pages, see `pages.iter_sheets`) share
  `DecodeLimits.max_file_decode_seconds` of wall-clock time, counted from each request sent to its reply (neither
  the wait for a turn nor the child's start-up is the file's doing). A request gets at most what is left of it,
  and a reply that arrives past it refuses the file all the same.

Outcomes become the upload refusals of `tracedesk.imaging.errors`: wall-clock or processor time exceeded ->
`DecodeTimeLimit` (422), the file's budget exceeded -> `FileDecodeTimeLimit` (422); MemoryError reported, or the
child killed by a signal after using at least half its memory -> `DecodeMemoryLimit` (413); any other abnormal end
-> `DecoderStopped` (422), whose message states the memory used. Why half: an address-space limit fails the
allocation that would cross it, and a decoder running out grows its memory step by step up to it (measured peak
resident sets, ru_maxrss: PDFium inflating a content stream died at 99% of a 2048 MiB limit, PDFium drawing nested
forms at 84% of 512 MiB), so a process stopped by the limit has typically used more than half of it; one that dies
early is reported as stopped, with the memory it used, rather than guessed to be a bomb. A refusal the child
reports (a damaged page) is raised as the same `UploadRefused` subclass; an unexpected exception in the child is a
bug (RuntimeError).

At most `DecodeLimits.max_parallel_decodes` requests (the ``decode_parallel`` setting) run at once in the whole
web process, so decoding never holds more than that many times the memory limit, whatever the number of
simultaneous uploads.
"""

from __future__ import annotations

import contextlib
import math
import os
import signal
import subprocess
import threading
import time
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from types import TracebackType
from typing import Any, TypeVar

from tracedesk.imaging.decoder_launch import (
    DECODER_COMMAND,
    inherited_peak_bytes,
    own_peak_rss_bytes,
    retire,
    start_decoder,
)
from tracedesk.imaging.decoder_wire import WireError, read_frame, read_into, write_frame
from tracedesk.imaging.errors import (
    DecodeMemoryLimit,
    DecoderStopped,
    DecodeTimeLimit,
    FileDecodeTimeLimit,
    UploadRefused,
    refusal_for,
)
from tracedesk.imaging.limits import DecodeLimits

#: Starting the child (importing numpy, libvips, PDFium) takes 0.2-0.8 s; this only catches a broken install.
STARTUP_SECONDS = 60.0
_MEMORY_EVIDENCE = 0.5
#: How often the child's peak memory is sampled while it works (a decoder needs far longer to fill its limit).
SAMPLE_SECONDS = 0.01
INHERITANCE_MARGIN_BYTES = 16 * 2**20
T = TypeVar("T")


class _Turns:
    """The requests running in this process; each waits for its turn under the parallel cap its limits carry.

    A semaphore fixes its size when it is made, at import, before any settings are read; a count guarded by a
    condition takes the cap from each request's limits (built from the settings), and while every request
    carries the same cap it behaves exactly as a semaphore of that size.
    """

    def __init__(self) -> None:
        self._changed = threading.Condition()
        self._running = 0

    @contextlib.contextmanager
    def taken(self, cap: int) -> Iterator[None]:
        """Hold a turn for the block, once fewer than `cap` requests are running."""
        with self._changed:
            self._changed.wait_for(lambda: self._running < cap)
            self._running += 1
        try:
            yield
        finally:
            with self._changed:
                self._running -= 1
                self._changed.notify_all()  # waiters may have different caps: each checks its own


_TURNS = _Turns()


def _fresh_turns() -> None:
    # A forked process must not inherit turns that its parent's other threads were holding at the fork.
    global _TURNS
    _TURNS = _Turns()


os.register_at_fork(after_in_child=_fresh_turns)


@dataclass(frozen=True)
class Reply:
    """A successful answer: the reply's header and its payload (empty when it has none)."""

    header: dict[str, Any]
    payload: bytearray


@dataclass(frozen=True)
class _Ending:
    """How a child that stopped answering ended: its exit code (negative: killed by that signal) and peak RSS."""

    exit_code: int
    peak_rss_bytes: int
    killed_for_time: bool


def _mib(count: float) -> str:
    return f"{count / 2**20:.0f} MiB"


class DecoderProcess:
    """A decoder child process for a series of requests (one upload), used by one thread at a time.

    Parameters
    ----------
    limits
        The time and memory limits (`max_decode_seconds`, `max_file_decode_seconds`, `max_decode_memory_bytes`)
        and the process-wide parallel cap (`max_parallel_decodes`).
    command
        The child's command line (tests run their own operations through `decoder_child.serve`).
    clock
        Seconds from a fixed origin, which measure the requests against the file's budget (tests pass one that
        advances by a known step per reading).
    """

    def __init__(
        self,
        limits: DecodeLimits,
        *,
        command: Sequence[str] = DECODER_COMMAND,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self.limits = limits
        self._command = list(command)
        self._clock = clock
        self._process: subprocess.Popen[bytes] | None = None
        self._killed_for_time = False
        self._sampled_peak = 0
        #: Wall-clock seconds the requests have taken so far, against `limits.max_file_decode_seconds`.
        self._spent_seconds = 0.0
        #: Whether the running request's deadline is what was left of the file's budget (not the page limit).
        self._budget_binds = False

    def __enter__(self) -> DecoderProcess:
        return self

    def __exit__(
        self, kind: type[BaseException] | None, error: BaseException | None, trace: TracebackType | None
    ) -> None:
        self.close()

    @property
    def processor_seconds(self) -> float:
        """The processor time a request may use, all threads together, in seconds."""
        return self.limits.max_decode_seconds * (os.cpu_count() or 1)

    def call(self, operation: str, arguments: Mapping[str, Any], *, what: str, max_payload_bytes: int = 0) -> Reply:
        """Run `operation` in the child and return its reply.

        Parameters
        ----------
        operation, arguments
            What to do (see `decoder_tasks`).
        what
            The work in words for refusal messages, e.g. "rendering page 2 of the PDF".
        max_payload_bytes
            The largest payload the caller expects (its page's pixels); more is a broken child.

        Raises
        ------
        UploadRefused
            `DecodeTimeLimit`, `FileDecodeTimeLimit`, `DecodeMemoryLimit`, `DecoderStopped`, or the refusal the
            child reported.
        RuntimeError
            The child failed unexpectedly or broke the protocol (a bug, not a property of the file).
        """
        message = {"operation": operation, "arguments": dict(arguments), "cpu_seconds": self.processor_seconds}
        seconds = self._request_seconds(what)  # before a turn and a child are taken for a file already refused
        with _TURNS.taken(self.limits.max_parallel_decodes):
            process = self._running()
            started = self._clock()
            try:
                reply = self._request(process, message, seconds=seconds, what=what, max_payload_bytes=max_payload_bytes)
            finally:
                self._spent_seconds += self._clock() - started
        if self._spent_seconds > self.limits.max_file_decode_seconds:
            raise FileDecodeTimeLimit(self._over_budget(what))  # answered, but past the budget all the same
        return reply

    def close(self) -> None:
        """Ask the child to exit (end of its input) and wait for it; kill it if it does not."""
        process, self._process = self._process, None
        if process is not None:
            retire(process)

    def _request_seconds(self, what: str) -> float:
        """The wall-clock time the next request may take: the page limit, or what is left of the file's budget
        when that is less."""
        left = self.limits.max_file_decode_seconds - self._spent_seconds
        if left <= 0:
            raise FileDecodeTimeLimit(self._over_budget(what))
        self._budget_binds = left < self.limits.max_decode_seconds
        return min(left, self.limits.max_decode_seconds)

    def _over_budget(self, what: str) -> str:
        return (
            f"{what} went past {self.limits.max_file_decode_seconds:g} s, the decoding time allowed for all the "
            "pages of one file together, so the file was refused; split it into smaller files, or it may be damaged "
            "or built to be slow"
        )

    # -- the child's life --------------------------------------------------------------------------------

    def _running(self) -> subprocess.Popen[bytes]:
        if self._process is not None and self._process.poll() is None:
            return self._process
        self.close()
        process = self._process = start_decoder(self._command)
        self._sampled_peak = 0
        try:
            write_frame(self._stdin(process), {"memory_bytes": self.limits.max_decode_memory_bytes})
            ready = self._with_deadline(process, STARTUP_SECONDS, lambda: read_frame(self._stdout(process)))
        except BrokenPipeError:
            ready = None
        if not ready or not ready.get("ready"):
            ending = self._ended(process)
            raise RuntimeError(f"the decoder process did not start (exit code {ending.exit_code})")
        return process

    @staticmethod
    def _stdin(process: subprocess.Popen[bytes]) -> int:
        assert process.stdin is not None
        return process.stdin.fileno()

    @staticmethod
    def _stdout(process: subprocess.Popen[bytes]) -> int:
        assert process.stdout is not None
        return process.stdout.fileno()

    def _with_deadline(self, process: subprocess.Popen[bytes], seconds: float, work: Callable[[], T]) -> T:
        """Run `work` (blocking reads from the child); SIGKILL the child if `seconds` pass first. Meanwhile the
        child's own peak resident set is sampled (see `_ended` for why `wait4` alone cannot tell it)."""
        self._killed_for_time = False
        done = threading.Event()
        watch = threading.Thread(target=self._watch, args=(process, seconds, done), daemon=True)
        watch.start()
        try:
            return work()
        finally:
            done.set()
            watch.join()

    def _watch(self, process: subprocess.Popen[bytes], seconds: float, done: threading.Event) -> None:
        deadline = time.monotonic() + seconds
        while not done.wait(min(SAMPLE_SECONDS, max(deadline - time.monotonic(), 0.0))):
            self._sampled_peak = max(self._sampled_peak, own_peak_rss_bytes(process.pid))
            if time.monotonic() >= deadline:
                self._kill_for_time(process)
                return

    def _kill_for_time(self, process: subprocess.Popen[bytes]) -> None:
        self._killed_for_time = True
        _kill_unreaped(process)

    def _ended(self, process: subprocess.Popen[bytes]) -> _Ending:
        """Reap a child that stopped answering, with its peak memory (which `Popen.wait` does not report).

        `wait4`'s ru_maxrss also counts the web process's memory as it was when the child was spawned (Linux
        keeps the high-water mark across exec), so it is believed only where it exceeds that inheritance;
        otherwise the peak is the child's own high-water mark (VmHWM) sampled while it worked.
        """
        killed_for_time = self._killed_for_time
        peak = self._sampled_peak
        if process.returncode is None:
            _kill_unreaped(process)  # normally already dead; never left running once it stopped answering
            _, status, usage = os.wait4(process.pid, 0)
            process.returncode = os.waitstatus_to_exitcode(status)
            reaped_peak = usage.ru_maxrss * 1024  # kibibytes on Linux
            if reaped_peak > inherited_peak_bytes(process) + INHERITANCE_MARGIN_BYTES:
                peak = max(peak, reaped_peak)
        self.close()
        return _Ending(process.returncode, peak, killed_for_time)

    # -- replies -----------------------------------------------------------------------------------------

    def _request(
        self,
        process: subprocess.Popen[bytes],
        message: Mapping[str, Any],
        *,
        seconds: float,
        what: str,
        max_payload_bytes: int,
    ) -> Reply:
        try:
            write_frame(self._stdin(process), message)
        except BrokenPipeError:
            raise self._refusal(self._ended(process), what) from None
        return self._receive(process, seconds=seconds, what=what, max_payload_bytes=max_payload_bytes)

    def _receive(self, process: subprocess.Popen[bytes], *, seconds: float, what: str, max_payload_bytes: int) -> Reply:
        def read_reply() -> tuple[dict[str, Any], bytearray] | None:
            header = read_frame(self._stdout(process))
            if header is None:
                return None
            size = int(header.get("payload_bytes", 0))
            if not 0 <= size <= max_payload_bytes:
                raise WireError(f"the decoder sent {size} bytes of pixels where at most {max_payload_bytes} fit")
            payload = bytearray(size)
            if read_into(self._stdout(process), memoryview(payload)) < size:
                return None
            return header, payload

        try:
            received = self._with_deadline(process, seconds, read_reply)
        except (WireError, ValueError) as exc:
            self._ended(process)
            raise RuntimeError(f"the decoder process broke the protocol while {what}: {exc}") from exc
        if received is None:
            raise self._refusal(self._ended(process), what)
        header, payload = received
        if "refused" in header:
            raise refusal_for(str(header["refused"]), str(header["reason"]))
        if header.get("out_of_memory"):
            self.close()
            limit = _mib(self.limits.max_decode_memory_bytes)
            raise DecodeMemoryLimit(f"{what} needs more than the {limit} of memory allowed, so the file was refused")
        if "error" in header:
            raise RuntimeError(f"the decoder process failed while {what}: {header['error']}")
        return Reply(header, payload)

    def _refusal(self, ending: _Ending, what: str) -> UploadRefused:
        limit = self.limits.max_decode_memory_bytes
        if ending.killed_for_time and self._budget_binds:
            return FileDecodeTimeLimit(self._over_budget(what))
        if ending.killed_for_time:
            return DecodeTimeLimit(
                f"{what} took longer than the limit of {self.limits.max_decode_seconds:g} s, so the file was "
                "refused; it may be damaged or built to be slow"
            )
        if ending.exit_code == -signal.SIGXCPU:
            return DecodeTimeLimit(
                f"{what} used more than {math.ceil(self.processor_seconds)} s of processor time, the limit, so the "
                "file was refused; it may be damaged or built to be slow"
            )
        if ending.peak_rss_bytes >= _MEMORY_EVIDENCE * limit:
            return DecodeMemoryLimit(
                f"{what} needs more than the {_mib(limit)} of memory allowed (the decoder stopped after using "
                f"{_mib(ending.peak_rss_bytes)}), so the file was refused; it may be a decompression bomb"
            )
        return DecoderStopped(
            f"{what} stopped the decoder ({_describe_exit(ending.exit_code)}, after using "
            f"{_mib(ending.peak_rss_bytes)} of memory); the file is damaged or needs more than the {_mib(limit)} "
            "allowed"
        )


def _kill_unreaped(process: subprocess.Popen[bytes]) -> None:
    # Not Popen.kill: it polls first, and reaping here would lose the child's resource usage to `_ended`. An
    # unreaped child keeps its pid (at worst a zombie), so the signal cannot reach another process.
    if process.returncode is None:
        with contextlib.suppress(ProcessLookupError):
            os.kill(process.pid, signal.SIGKILL)


def _describe_exit(exit_code: int) -> str:
    if exit_code < 0:
        try:
            return f"signal {signal.Signals(-exit_code).name}"
        except ValueError:
            return f"signal {-exit_code}"
    return f"exit code {exit_code}"
