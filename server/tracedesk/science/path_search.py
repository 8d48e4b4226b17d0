"""Optimal path through a score grid, one row per column, by dynamic programming.

The path maximises  sum of reward[row(c), c]  minus  the cost of the row changes between columns.
A change of up to ``free_rows`` rows between neighbouring columns is free (the first rows moved from
the previous row; the rest, next to the new row, are paid for): a pen may climb that
steeply anywhere, and a path bridging a pen gap must be able to follow the pen's slope across it
(with a plain per-row cost, waiting for the pen to come back is cheaper than meeting it).
Beyond that, every row crossed costs ``step_weight + continuity_weight * (1 - g)``, where g is the
larger reward of the two columns in the row crossed. So a jump through background is expensive (the
path does not hop to specks), while a steep stretch of pen (a near-vertical stroke, which fills the
rows it crosses) costs almost nothing.

With cumulative positions P[r] = sum of per-row costs up to r, the cost beyond the free rows is
|P[r'] - P[r]|: an L1 distance in a warped coordinate. Its best predecessor for every row comes from
two running maxima (one downwards, one upwards), after a sliding maximum over the free rows, so
each column costs O(rows) and no jump window is needed.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]
IndexArray = NDArray[np.intp]


def _running_best(values: FloatArray, order: IndexArray) -> tuple[FloatArray, IndexArray]:
    """Running maximum of ``values`` and the index where it was attained (the latest on ties)."""
    best = np.maximum.accumulate(values)
    where = np.where(values == best, order, 0)
    np.maximum.accumulate(where, out=where)
    return best, where


def _best_predecessors(total: FloatArray, position: FloatArray, order: IndexArray) -> tuple[FloatArray, IndexArray]:
    """For each row r': max over r of total[r] - |position[r'] - position[r]|, and the best r."""
    downward, down_from = _running_best(total + position, order)
    downward -= position
    upward_rev, up_from_rev = _running_best((total - position)[::-1], order)
    upward = upward_rev[::-1] + position
    up_from = (len(total) - 1) - up_from_rev[::-1]
    take_up = upward > downward
    return np.where(take_up, upward, downward), np.where(take_up, up_from, down_from)


def _bridge_positions(reward: FloatArray, *, continuity_weight: float, step_weight: float) -> FloatArray:
    """Cumulative crossing cost along the rows for each column transition (shape (n_cols - 1, n_rows))."""
    crossed = np.maximum(reward[:-1], reward[1:])
    return np.cumsum(step_weight + continuity_weight * (1.0 - crossed), axis=1)


def search_optimal_rows(
    reward: NDArray[np.floating],
    *,
    continuity_weight: float,
    step_weight: float,
    free_rows: int = 2,
    start_row: float | None = None,
    end_row: float | None = None,
    progress: Callable[[float], None] | None = None,
) -> IndexArray:
    """Best row for every column of a reward grid.

    Parameters
    ----------
    reward : numpy.ndarray, shape (n_rows, n_cols)
        Pen score of each cell, in [0, 1].
    continuity_weight : float
        Cost of crossing one row of background (score 0), relative to the reward of one cell of pen.
    step_weight : float
        Cost of crossing one row of anything (keeps jumps short when all else is equal).
    free_rows : int
        Row change between neighbouring columns that costs nothing.
    start_row, end_row : float, optional
        Soft anchors: the first / last column pays ``continuity_weight`` per row away from them.
    progress : callable, optional
        Called with the fraction of columns done.

    Returns
    -------
    numpy.ndarray of intp, shape (n_cols,)
        Row index of the path in each column.
    """
    by_column = np.ascontiguousarray(np.asarray(reward, dtype=np.float64).T)
    n_cols, n_rows = by_column.shape
    order = np.arange(n_rows)
    positions = _bridge_positions(by_column, continuity_weight=continuity_weight, step_weight=step_weight)
    totals = np.empty((n_cols, n_rows), dtype=np.float64)
    totals[0] = by_column[0] - _anchor_cost(order, start_row, continuity_weight)
    came_from = np.empty((n_cols, n_rows), dtype=np.int32)
    report_every = max(1, n_cols // 20)
    for column in range(1, n_cols):
        reachable = _sliding_maximum(totals[column - 1], free_rows)
        best, came_from[column] = _best_predecessors(reachable, positions[column - 1], order)
        totals[column] = best + by_column[column]
        if progress is not None and column % report_every == 0:
            progress(column / n_cols)
    final = totals[-1] - _anchor_cost(order, end_row, continuity_weight)
    return _backtrack(totals, came_from, int(np.argmax(final)), free_rows)


def _sliding_maximum(values: FloatArray, reach: int) -> FloatArray:
    """max(values[r - reach : r + reach + 1]) for every r (a few shifted maxima: cheaper than a filter
    call for the small reach used here)."""
    result = values.copy()
    for shift in range(1, reach + 1):
        np.maximum(result[shift:], values[:-shift], out=result[shift:])
        np.maximum(result[:-shift], values[shift:], out=result[:-shift])
    return result


def _anchor_cost(order: IndexArray, anchor_row: float | None, weight: float) -> FloatArray:
    if anchor_row is None:
        return np.zeros(len(order))
    return np.asarray(weight * np.abs(order - anchor_row), dtype=np.float64)


def _backtrack(totals: FloatArray, came_from: NDArray[np.int32], last_row: int, free_rows: int) -> IndexArray:
    """Follow the stored predecessors back; the free move is recovered as the best row within reach."""
    rows = np.empty(came_from.shape[0], dtype=np.intp)
    rows[-1] = last_row
    n_rows = totals.shape[1]
    for column in range(came_from.shape[0] - 1, 0, -1):
        middle = int(came_from[column, rows[column]])
        low, high = max(0, middle - free_rows), min(n_rows, middle + free_rows + 1)
        rows[column - 1] = low + int(np.argmax(totals[column - 1, low:high]))
    return rows
