"""How many decodes run at once: `DecodeLimits.max_parallel_decodes` (the ``decode_parallel`` setting).

Two threads each send one request to a decoder process of their own (tests/imaging/limiter_child.py's ``meet``:
leave a mark in a shared folder, wait for the other's). Requests that run side by side see each other's mark;
requests run one after the other cannot, since the second is not sent before the first has answered. The
children's start and end stamps come from CLOCK_MONOTONIC, one clock for every process of the machine
(clock_gettime(2)), so their order is comparable. No test asserts how long anything took.
"""

from __future__ import annotations

import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

from tracedesk.imaging import DecodeLimits
from tracedesk.imaging.decoder_process import DecoderProcess

CHILD = (sys.executable, str(Path(__file__).with_name("limiter_child.py")))
MIB = 2**20


def _meet_in_two_threads(folder: Path, *, parallel: int, wait_seconds: float) -> list[dict[str, Any]]:
    limits = DecodeLimits(max_decode_seconds=60.0, max_decode_memory_bytes=512 * MIB, max_parallel_decodes=parallel)
    arguments = {"folder": str(folder), "expected": 2, "wait_seconds": wait_seconds}

    def one_request(_: int) -> dict[str, Any]:
        with DecoderProcess(limits, command=CHILD) as decoder:
            return decoder.call("meet", arguments, what="decoding").header

    with ThreadPoolExecutor(max_workers=2) as pool:
        return list(pool.map(one_request, range(2)))


def test_with_one_decode_at_a_time_two_requests_never_overlap(tmp_path: Path) -> None:
    first, second = sorted(_meet_in_two_threads(tmp_path, parallel=1, wait_seconds=0.3), key=lambda r: r["started"])
    # Serialised: the first request waited alone (its partner was not sent yet); the second found its mark.
    assert (first["met"], second["met"]) == (False, True)
    assert first["ended"] <= second["started"]  # the intervals do not overlap (common practice: interval order)


def test_with_two_decodes_at_a_time_two_requests_run_side_by_side(tmp_path: Path) -> None:
    replies = _meet_in_two_threads(tmp_path, parallel=2, wait_seconds=60.0)
    assert [reply["met"] for reply in replies] == [True, True]  # each saw the other's mark while it waited
    first, second = sorted(replies, key=lambda r: r["started"])
    assert second["started"] < first["ended"]  # overlapping intervals
