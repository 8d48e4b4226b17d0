"""The dynamic programme of tracedesk.science.path_search against exhaustive enumeration."""

import itertools

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tracedesk.science.path_search import search_optimal_rows


def path_value(reward, rows, *, continuity_weight, step_weight, free_rows, start_row=None, end_row=None):
    """The objective written out plainly: rewards minus the cost of each row change beyond the free rows,
    where crossing a row costs step + continuity * (1 - larger reward of the two columns there)."""
    total = sum(reward[r, c] for c, r in enumerate(rows))
    for c in range(1, len(rows)):
        crossed = np.maximum(reward[:, c - 1], reward[:, c])
        per_row = step_weight + continuity_weight * (1.0 - crossed)
        # The free rows are the first ones moved from the previous row; the rest, next to the new row,
        # are paid for: rows (previous + free, new] going down the grid, (new, previous - free] going up.
        paid = max(0, abs(rows[c] - rows[c - 1]) - free_rows)
        if rows[c] > rows[c - 1]:
            total -= per_row[rows[c] - paid + 1 : rows[c] + 1].sum()
        else:
            total -= per_row[rows[c] + 1 : rows[c] + 1 + paid].sum()
    if start_row is not None:
        total -= continuity_weight * abs(rows[0] - start_row)
    if end_row is not None:
        total -= continuity_weight * abs(rows[-1] - end_row)
    return total


@pytest.mark.parametrize("seed", range(12))
@pytest.mark.parametrize("free_rows", [0, 1, 2])
def test_dynamic_programme_finds_the_best_path(seed, free_rows):
    """Exhaustive search over all 6^4 paths of a small random grid."""
    rng = np.random.default_rng(seed)
    reward = rng.random((6, 4)) * (rng.random((6, 4)) > 0.5)
    options = {"continuity_weight": 0.7, "step_weight": 0.05, "free_rows": free_rows}
    anchors = {"start_row": 1.0, "end_row": 4.0} if seed % 2 else {}
    best = max(path_value(reward, rows, **options, **anchors) for rows in itertools.product(range(6), repeat=4))
    found = search_optimal_rows(reward, **options, **anchors)
    assert_allclose(path_value(reward, list(found), **options, **anchors), best, atol=1e-9)


def test_path_follows_a_line_and_ignores_a_far_speck():
    reward = np.zeros((50, 30))
    rows = (10 + np.arange(30) * 0.5).astype(int)
    reward[rows, np.arange(30)] = 1.0
    reward[45, 15] = 1.0  # a speck far from the line
    found = search_optimal_rows(reward, continuity_weight=0.5, step_weight=0.025)
    assert_allclose(found, rows)


def test_path_bridges_a_gap_along_the_slope():
    """Across a gap the path meets the line where it comes back instead of waiting for it."""
    reward = np.zeros((80, 40))
    rows = np.arange(40) + 20
    keep = (np.arange(40) < 10) | (np.arange(40) >= 20)
    reward[rows[keep], np.arange(40)[keep]] = 1.0
    found = search_optimal_rows(reward, continuity_weight=0.5, step_weight=0.025, free_rows=2)
    assert_allclose(found[keep], rows[keep])
