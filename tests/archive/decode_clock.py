"""A clock for the file decoding budget that makes "which page runs out" independent of the machine's speed.

`tracedesk.imaging.decoder_process.DecoderProcess` reads its clock when it sends a request and when the reply
arrives, so with `SteppingClock` (one second per reading) every request costs exactly one second of the budget.
"""

from __future__ import annotations

import itertools

import pytest

from tracedesk.imaging import pages
from tracedesk.imaging.decoder_process import DecoderProcess
from tracedesk.imaging.limits import DecodeLimits


class SteppingClock:
    """Reads 0, 1, 2, ... seconds, one more per reading, and counts its readings."""

    def __init__(self) -> None:
        self._ticks = itertools.count()
        self.readings = 0

    def __call__(self) -> float:
        self.readings += 1
        return float(next(self._ticks))


def use_stepping_clocks(monkeypatch: pytest.MonkeyPatch) -> None:
    """Make every decoder session of `tracedesk.imaging.pages` (page lists, pages) use a stepping clock of its own."""
    real = DecoderProcess

    def stepping(limits: DecodeLimits) -> DecoderProcess:
        return real(limits, clock=SteppingClock())

    monkeypatch.setattr(pages, "DecoderProcess", stepping)
