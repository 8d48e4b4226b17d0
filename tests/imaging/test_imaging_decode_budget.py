"""The decoding budget of one file (`DecodeLimits.max_file_decode_seconds`): the pages of a file share it, the file
is refused once they go past it, with a reason naming the page reached and the budget; the per-page limit stays.

Most tests measure the budget with a stepping clock (tests/archive/decode_clock.py: each request costs exactly
one second of budget), which makes the page a file is refused on independent of how fast the machine is. The
children are tests/imaging/limiter_child.py (``spin`` never answers) and the real decoder, for real files made
with Pillow. No test asserts how long anything took.
"""

from __future__ import annotations

import io
import os
import sys
import time
from collections.abc import Callable
from pathlib import Path

import pytest
from PIL import Image
from tests.archive.decode_clock import SteppingClock, use_stepping_clocks

from tracedesk.imaging import (
    DecodeLimits,
    DecodeTimeLimit,
    FileDecodeTimeLimit,
    ImageFormat,
    examine_upload,
    iter_sheets,
)
from tracedesk.imaging.decoder_process import DecoderProcess
from tracedesk.imaging.errors import refusal_for

CHILD = (sys.executable, str(Path(__file__).with_name("limiter_child.py")))
MIB = 2**20


def _decoder(
    *, budget: float, page_seconds: float = 30.0, clock: Callable[[], float] = time.monotonic
) -> DecoderProcess:
    limits = DecodeLimits(
        max_decode_seconds=page_seconds, max_file_decode_seconds=budget, max_decode_memory_bytes=512 * MIB
    )
    return DecoderProcess(limits, command=CHILD, clock=clock)


def _is_running(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    return True


def _tiff(path: Path, pages: int) -> Path:
    """A multi-page TIFF of small plain frames (invented content)."""
    frames = [Image.new("RGB", (120, 80), (40 * index, 90, 200)) for index in range(pages)]
    buffer = io.BytesIO()
    frames[0].save(buffer, format="TIFF", save_all=True, append_images=frames[1:])
    path.write_bytes(buffer.getvalue())
    return path


def test_a_request_past_what_is_left_of_the_budget_is_killed_and_the_file_refused() -> None:
    clock = SteppingClock()
    with _decoder(budget=1.5, clock=clock) as decoder:
        decoder.call("limits", {}, what="decoding page 1 of the TIFF file")  # 1 s of the 1.5 s
        with pytest.raises(FileDecodeTimeLimit) as refused:
            decoder.call(
                "spin", {}, what="decoding page 2 of the TIFF file"
            )  # gets the 0.5 s left, real time, then killed
    reason = refused.value.reason
    assert reason.startswith("decoding page 2 of the TIFF file went past 1.5 s, the decoding time allowed for all")
    assert refused.value.http_status == 422
    assert refused.value.code == "file_decode_time_limit"
    assert isinstance(refused.value, DecodeTimeLimit)  # still a time limit for anyone catching those


def test_with_the_real_clock_a_request_that_never_answers_stops_at_the_budget_not_the_page_limit() -> None:
    with _decoder(budget=5.0, page_seconds=600.0) as decoder:
        pid = decoder.call("limits", {}, what="rendering page 1 of the PDF file").header["pid"]
        with pytest.raises(FileDecodeTimeLimit) as refused:
            decoder.call("spin", {}, what="rendering page 2 of the PDF file")
        assert not _is_running(pid)  # killed at the budget, not left spinning for the page limit
    assert refused.value.reason.startswith("rendering page 2 of the PDF file went past 5 s")


def test_a_reply_that_arrives_past_the_budget_refuses_the_file() -> None:
    with _decoder(budget=0.5, clock=SteppingClock()) as decoder, pytest.raises(FileDecodeTimeLimit) as refused:
        decoder.call("limits", {}, what="decoding page 1 of the TIFF file")  # costs 1 s of a 0.5 s budget
    assert refused.value.reason.startswith("decoding page 1 of the TIFF file went past 0.5 s")


def test_once_the_budget_is_spent_no_further_request_is_sent() -> None:
    clock = SteppingClock()
    with _decoder(budget=2.0, clock=clock) as decoder:
        for page in (1, 2):  # exactly the budget: 2 s of 2 s is not past it
            decoder.call("limits", {}, what=f"decoding page {page} of the TIFF file")
        with pytest.raises(FileDecodeTimeLimit) as refused:
            decoder.call("limits", {}, what="decoding page 3 of the TIFF file")
    assert refused.value.reason.startswith("decoding page 3 of the TIFF file went past 2 s")
    assert clock.readings == 4  # two readings per answered request; the third request never started


def test_the_page_limit_still_applies_inside_a_larger_budget() -> None:
    with _decoder(budget=600.0, page_seconds=1.0) as decoder, pytest.raises(DecodeTimeLimit) as refused:
        decoder.call("spin", {}, what="rendering page 4 of the PDF file")
    assert type(refused.value) is DecodeTimeLimit
    assert refused.value.reason.startswith("rendering page 4 of the PDF file took longer than the limit of 1 s")


def test_the_refusal_crosses_the_process_boundary_as_itself() -> None:
    """A decoder reports refusals by code (decoder_wire); the new code must map back to the new class."""
    refusal = refusal_for("file_decode_time_limit", "page 9 went past 600 s")
    assert type(refusal) is FileDecodeTimeLimit and refusal.reason == "page 9 went past 600 s"


def test_a_tiff_whose_pages_go_past_the_budget_is_refused_at_the_page_reached(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    use_stepping_clocks(monkeypatch)
    info = examine_upload(_tiff(tmp_path / "week.tif", 4), limits=DecodeLimits(max_file_decode_seconds=2.5))
    sheets = iter_sheets(info)
    assert [next(sheets).page_index, next(sheets).page_index] == [0, 1]  # 2 s of 2.5 s
    with pytest.raises(FileDecodeTimeLimit) as refused:
        next(sheets)
    assert refused.value.reason.startswith("decoding page 3 of the TIFF file went past 2.5 s")


def test_a_file_within_the_budget_gives_all_its_sheets(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    use_stepping_clocks(monkeypatch)
    info = examine_upload(_tiff(tmp_path / "week.tif", 3), limits=DecodeLimits(max_file_decode_seconds=3.0))
    assert info.image_format is ImageFormat.TIFF
    assert [sheet.page_index for sheet in iter_sheets(info)] == [0, 1, 2]  # 3 s of 3 s


def test_with_the_real_clock_a_tiny_budget_refuses_a_real_file_at_its_first_page(tmp_path: Path) -> None:
    """A microsecond is less than any decode takes (a pipe round trip to another process alone takes longer)."""
    info = examine_upload(_tiff(tmp_path / "week.tif", 2), limits=DecodeLimits(max_file_decode_seconds=1e-6))
    with pytest.raises(FileDecodeTimeLimit) as refused:
        list(iter_sheets(info))
    assert refused.value.reason.startswith("decoding page 1 of the TIFF file went past 1e-06 s")


@pytest.mark.parametrize("field", ["max_file_decode_seconds", "max_parallel_decodes"])
@pytest.mark.parametrize("value", [0, -1])
def test_limits_refuse_a_budget_or_parallel_cap_no_decode_could_work_with(field: str, value: int) -> None:
    with pytest.raises(ValueError, match=field):
        DecodeLimits(**{field: value})


def test_limits_refuse_an_endless_budget() -> None:
    with pytest.raises(ValueError, match="max_file_decode_seconds"):
        DecodeLimits(max_file_decode_seconds=float("inf"))
