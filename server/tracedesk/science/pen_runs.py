"""Find the pen in each column of a search window: the run of pen-coloured samples it crosses.

A "column" is a line of samples across the pen: a pixel column for strip charts, a radial line for
circular charts. Each column has a window [lo, hi) of sample positions (from the coarse path). Samples
whose CIEDE2000 difference to the pen (from the same lookup table as the coarse pass) is within the
tolerance are candidates; consecutive
candidates form runs; the run with the most pen score is the pen in that column. A column with no
candidate is a gap. When the chosen run touches the window edge, the window grows (the pen is thicker
than the window, or an ink blot sits on it) until the run ends inside it.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.pen_likelihood import PenColourModel, table_pen_score

FloatArray = NDArray[np.float64]
IndexArray = NDArray[np.intp]
BoolArray = NDArray[np.bool_]

MAX_WINDOW_GROWTHS = 8
PAPER_SAMPLES = 5000


class ColumnSampler(Protocol):
    """Reads sRGB samples (0-255 floats) at integer positions along numbered columns."""

    @property
    def n_columns(self) -> int:
        """Number of columns."""

    @property
    def n_positions(self) -> int:
        """Number of sample positions along every column."""

    def sample(self, columns: IndexArray, positions: IndexArray) -> tuple[NDArray[np.uint8] | FloatArray, BoolArray]:
        """(n, 3) sRGB samples (uint8, or floats on the 0-255 scale) and whether each is in the region."""

    def sample_precise(
        self, columns: IndexArray, positions: IndexArray
    ) -> tuple[NDArray[np.uint8] | FloatArray, BoolArray]:
        """As ``sample``, but interpolated where the grid falls between pixels (for sub-pixel work)."""


@dataclass(frozen=True)
class RaggedSamples:
    """Samples of many windows, flattened: column and position of each sample."""

    columns: IndexArray
    positions: IndexArray
    first_in_column: BoolArray
    last_in_column: BoolArray


def ragged_samples(columns: IndexArray, lo: IndexArray, hi: IndexArray) -> RaggedSamples:
    """Flatten windows [lo, hi) of the given columns into one list of (column, position)."""
    lengths = np.maximum(hi - lo, 0)
    total = int(lengths.sum())
    ends = np.cumsum(lengths)
    starts = ends - lengths
    sample_columns = np.repeat(columns, lengths)
    positions = np.arange(total) - np.repeat(starts - lo, lengths)
    first = np.zeros(total, dtype=bool)
    last = np.zeros(total, dtype=bool)
    non_empty = lengths > 0
    first[starts[non_empty]] = True
    last[ends[non_empty] - 1] = True
    return RaggedSamples(sample_columns, positions, first, last)


@dataclass(frozen=True)
class PenRuns:
    """Chosen run per column (start inclusive, stop exclusive; valid where ``found``)."""

    found: BoolArray
    start: IndexArray
    stop: IndexArray
    paper_rgb: FloatArray


@dataclass(frozen=True)
class _Runs:
    column: IndexArray
    start: IndexArray
    stop: IndexArray
    mass: FloatArray


def _runs_of(samples: RaggedSamples, score: FloatArray) -> _Runs:
    candidate = score > 0.0
    previous = np.concatenate([[False], candidate[:-1]])
    following = np.concatenate([candidate[1:], [False]])
    begins = candidate & (~previous | samples.first_in_column)
    ends = candidate & (~following | samples.last_in_column)
    run_of_sample = np.cumsum(begins) - 1
    mass = np.bincount(run_of_sample[candidate], weights=score[candidate], minlength=int(begins.sum())).astype(
        np.float64
    )
    return _Runs(samples.columns[begins], samples.positions[begins], samples.positions[ends] + 1, mass)


def _best_run_per_column(runs: _Runs, keep: BoolArray) -> tuple[IndexArray, IndexArray, IndexArray]:
    """Columns, starts and stops of the heaviest kept run of each column."""
    index = np.flatnonzero(keep)
    order = index[np.lexsort((-runs.mass[index], runs.column[index]))]
    columns, first = np.unique(runs.column[order], return_index=True)
    chosen = order[first]
    return columns, runs.start[chosen], runs.stop[chosen]


def choose_pen_runs(
    sampler: ColumnSampler, model: PenColourModel, *, window_lo: IndexArray, window_hi: IndexArray
) -> PenRuns:
    """Pick the pen's run in every column, growing windows where the run reaches their edge.

    Parameters
    ----------
    sampler : ColumnSampler
        Where the samples come from.
    model : PenColourModel
        Pen colour and tolerance.
    window_lo, window_hi : numpy.ndarray of intp, shape (n_columns,)
        Search window of each column, as sample positions [lo, hi).
    """
    n = sampler.n_columns
    lo = np.clip(window_lo, 0, sampler.n_positions)
    hi = np.clip(window_hi, lo, sampler.n_positions)
    found = np.zeros(n, dtype=bool)
    start = np.zeros(n, dtype=np.intp)
    stop = np.zeros(n, dtype=np.intp)
    todo = np.arange(n)
    paper = np.full(3, np.nan)
    for attempt in range(MAX_WINDOW_GROWTHS + 1):
        samples = ragged_samples(todo, lo[todo], hi[todo])
        rgb, inside = sampler.sample(samples.columns, samples.positions)
        score = np.where(inside, table_pen_score(rgb, model), 0.0)
        if attempt == 0:
            paper = _paper_colour(rgb[inside & (score == 0.0)])
        runs = _runs_of(samples, score)
        keep = np.ones(len(runs.column), dtype=bool) if attempt == 0 else _overlaps_previous(runs, start, stop)
        columns, run_start, run_stop = _best_run_per_column(runs, keep)
        found[columns], start[columns], stop[columns] = True, run_start, run_stop
        todo = _columns_to_grow(columns, run_start, run_stop, lo, hi, sampler.n_positions)
        if todo.size == 0:
            break
        growth = np.maximum(hi[todo] - lo[todo], 4)
        lo[todo] = np.maximum(lo[todo] - growth, 0)
        hi[todo] = np.minimum(hi[todo] + growth, sampler.n_positions)
    return PenRuns(found, start, stop, paper)


def _overlaps_previous(runs: _Runs, start: IndexArray, stop: IndexArray) -> BoolArray:
    # A grown window must keep following the run already chosen, not jump to another object.
    return (runs.start < stop[runs.column]) & (runs.stop > start[runs.column])


def _columns_to_grow(
    columns: IndexArray, run_start: IndexArray, run_stop: IndexArray, lo: IndexArray, hi: IndexArray, limit: int
) -> IndexArray:
    at_top = (run_start <= lo[columns]) & (lo[columns] > 0)
    at_bottom = (run_stop >= hi[columns]) & (hi[columns] < limit)
    return columns[at_top | at_bottom]


def _paper_colour(background: NDArray[np.uint8] | FloatArray) -> FloatArray:
    """Median colour of the samples that are not pen: the paper, in most windows.

    A few thousand samples pin the median down; sorting hundreds of thousands would not improve it.
    """
    if len(background) == 0:
        return np.full(3, 255.0)
    stride = max(1, len(background) // PAPER_SAMPLES)
    return np.asarray(np.median(background[::stride], axis=0), dtype=np.float64)
