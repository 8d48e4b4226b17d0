"""The decoder process's limits: a child past its wall-clock time, processor time or memory is stopped and the
upload refused with a clear message; refusals and pixels cross the process boundary intact.

The child is tests/imaging/limiter_child.py: the real serving loop and confinement
(`tracedesk.imaging.decoder_child.serve`) with operations that misbehave on purpose. Limits are set through
setrlimit(2) (Linux man-pages: RLIMIT_AS fails allocations past it, RLIMIT_CPU sends SIGXCPU at the soft limit);
the expected figures below follow from those definitions. No test asserts how long anything took.
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
from pathlib import Path

import pytest

from tracedesk.imaging import DecodeLimits, TooManyPixels
from tracedesk.imaging.decoder_launch import retire, start_decoder
from tracedesk.imaging.decoder_process import DecoderProcess
from tracedesk.imaging.errors import DecodeMemoryLimit, DecoderStopped, DecodeTimeLimit

CHILD = (sys.executable, str(Path(__file__).with_name("limiter_child.py")))
MIB = 2**20


def _decoder(*, seconds: float = 30.0, memory_mib: int = 1024) -> DecoderProcess:
    return DecoderProcess(
        DecodeLimits(max_decode_seconds=seconds, max_decode_memory_bytes=memory_mib * MIB), command=CHILD
    )


def _is_running(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    return True


def test_the_child_is_confined_before_it_reads_a_request() -> None:
    with _decoder(memory_mib=300) as decoder:
        reply = decoder.call("limits", {}, what="checking")
        header = reply.header
        assert header["address_space"] == [300 * MIB, 300 * MIB]  # soft = hard: it cannot raise its own limit
        assert header["core"] == [0, 0]  # an aborted bomb leaves no core file the size of its memory
        soft, _ = header["processor"]
        allowance = decoder.processor_seconds
        assert allowance == 30.0 * (os.cpu_count() or 1)
        # soft = ceil(used before the request + allowance): between the allowance and one second more
        assert allowance <= soft - header["processor_used"] <= allowance + 1
        assert header["environment"] == {"OPENBLAS_NUM_THREADS": "1", "MALLOC_ARENA_MAX": "2"}


def test_past_the_wall_clock_limit_the_child_is_killed_and_the_upload_refused() -> None:
    with _decoder(seconds=1.0) as decoder:
        pid = decoder.call("limits", {}, what="checking").header["pid"]
        with pytest.raises(DecodeTimeLimit) as refused:
            decoder.call("spin", {}, what="rendering page 3 of the PDF file")
        assert not _is_running(pid)
    assert refused.value.http_status == 422
    assert refused.value.reason.startswith("rendering page 3 of the PDF file took longer than the limit of 1 s")


def test_past_the_processor_time_limit_the_kernel_stops_the_child() -> None:
    """SIGXCPU comes from the kernel, so it stops a runaway decode even when nobody watches the clock."""
    with _decoder(seconds=60.0) as decoder, pytest.raises(DecodeTimeLimit) as refused:
        decoder.call("spin_past_processor_time", {}, what="decoding page 1 of the JPEG file")
    assert refused.value.http_status == 422
    assert "processor time" in refused.value.reason
    assert refused.value.reason.startswith("decoding page 1 of the JPEG file used more than")


def test_an_allocation_past_the_memory_limit_is_refused_as_too_large() -> None:
    with _decoder(memory_mib=256) as decoder:
        with pytest.raises(DecodeMemoryLimit) as refused:
            decoder.call("allocate", {"mebibytes": 1024}, what="rendering page 1 of the PDF file")
        assert decoder.call("allocate", {"mebibytes": 8}, what="again").header["held"] == 8 * MIB
    assert refused.value.http_status == 413
    assert refused.value.code == "decode_memory_limit"
    assert "256 MiB" in refused.value.reason


def test_a_child_aborting_after_using_most_of_its_memory_is_refused_as_too_large() -> None:
    """PDFium and GLib abort when an allocation fails; at least half the limit used marks it as memory."""
    with _decoder(memory_mib=1024) as decoder, pytest.raises(DecodeMemoryLimit) as refused:
        decoder.call("fill_then_abort", {"mebibytes": 600}, what="rendering page 1 of the PDF file")
    reason = refused.value.reason
    assert "1024 MiB" in reason
    used = int(reason.split("after using ")[1].split(" MiB")[0])
    assert 600 <= used <= 1024  # the 600 MiB written, plus the interpreter, within the limit


def test_a_child_aborting_early_is_refused_as_stopping_the_decoder() -> None:
    with _decoder(memory_mib=1024) as decoder, pytest.raises(DecoderStopped) as refused:
        decoder.call("fill_then_abort", {"mebibytes": 1}, what="rendering page 2 of the PDF file")
    assert refused.value.http_status == 422
    assert refused.value.reason.startswith("rendering page 2 of the PDF file stopped the decoder (signal SIGABRT")


def test_after_a_limit_the_next_request_gets_a_fresh_child() -> None:
    with _decoder(seconds=1.0) as decoder:
        first = decoder.call("limits", {}, what="checking").header["pid"]
        with pytest.raises(DecodeTimeLimit):
            decoder.call("spin", {}, what="decoding")
        second = decoder.call("limits", {}, what="checking").header["pid"]
    assert second != first
    assert not _is_running(second)  # closing the decoder ends its child


def test_pixels_cross_intact_and_a_payload_larger_than_expected_is_a_broken_child() -> None:
    size = 3 * 1000 * 700 + 11
    expected = bytes(index % 251 for index in range(size))
    with _decoder() as decoder:
        reply = decoder.call("pixels", {"bytes": size}, what="decoding", max_payload_bytes=size)
        assert reply.payload == expected
        with pytest.raises(RuntimeError, match="protocol"):
            decoder.call("pixels", {"bytes": size}, what="decoding", max_payload_bytes=size - 1)


def test_a_refusal_in_the_child_arrives_as_the_same_refusal() -> None:
    with _decoder() as decoder:
        with pytest.raises(TooManyPixels) as refused:
            decoder.call("refuse", {}, what="decoding")
        assert refused.value.reason == "the page is far too large"
        assert refused.value.http_status == 413
        with pytest.raises(RuntimeError, match="ValueError: a bug in an operation"):
            decoder.call("fail", {}, what="decoding")


def test_a_child_that_cannot_start_is_an_error_not_a_refusal() -> None:
    decoder = DecoderProcess(DecodeLimits(), command=(sys.executable, "-c", "raise SystemExit(7)"))
    with decoder, pytest.raises(RuntimeError, match="did not start"):
        decoder.call("limits", {}, what="checking")


def test_every_session_gets_a_process_nobody_used() -> None:
    """The spare hides the child's start-up, but two sessions never share a process (nor its memory)."""
    first, second = start_decoder(), start_decoder()
    try:
        assert first.pid != second.pid
        assert first.poll() is None and second.poll() is None
    finally:
        retire(first)
        retire(second)
    assert (first.returncode, second.returncode) == (0, 0)  # a spare nobody used exits when its input ends


@pytest.mark.parametrize(("seconds", "memory"), [(0.0, 1024 * MIB), (math.inf, 1024 * MIB), (1.0, 100 * MIB)])
def test_limits_refuse_values_no_decoder_could_work_with(seconds: float, memory: int) -> None:
    with pytest.raises(ValueError, match="max_decode"):
        DecodeLimits(max_decode_seconds=seconds, max_decode_memory_bytes=memory)


FROM_A_LARGE_PARENT = """
import sys
from pathlib import Path
from tracedesk.imaging import DecodeLimits
from tracedesk.imaging.decoder_process import DecoderProcess
from tracedesk.imaging.errors import DecodeMemoryLimit, DecoderStopped

ballast = b"\\x01" * (1200 * 2**20)  # this process's resident set passes the child's whole memory limit
child = (sys.executable, sys.argv[1])
limits = DecodeLimits(max_decode_seconds=30.0, max_decode_memory_bytes=1024 * 2**20)
for mebibytes in (1, 600):
    with DecoderProcess(limits, command=child) as decoder:
        try:
            decoder.call("fill_then_abort", {"mebibytes": mebibytes}, what="rendering")
        except (DecodeMemoryLimit, DecoderStopped) as refused:
            print(mebibytes, type(refused).__name__, refused.reason.split("after using ")[1].split(" MiB")[0])
"""


def test_the_memory_a_child_used_is_its_own_even_when_its_parent_is_large() -> None:
    """Linux's wait4 ru_maxrss keeps the high-water mark across fork and exec, so a child of a web process with a
    large resident set would seem to have used that much (proc(5): VmHWM is per memory map, ru_maxrss is not)."""
    run = subprocess.run(
        [sys.executable, "-c", FROM_A_LARGE_PARENT, CHILD[1]], capture_output=True, text=True, timeout=180
    )
    assert run.returncode == 0, run.stderr
    small, large = (line.split() for line in run.stdout.splitlines())
    assert small[:2] == ["1", "DecoderStopped"] and int(small[2]) < 300  # not the parent's 1200 MiB
    assert large[:2] == ["600", "DecodeMemoryLimit"] and 600 <= int(large[2]) <= 1024
