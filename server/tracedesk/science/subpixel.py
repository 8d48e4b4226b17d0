"""Sub-pixel position of the pen across each column: the centroid of the pen's coverage.

An anti-aliased or scanned line mixes pen and paper in proportion to how much of the pixel the ink
covers: colour = a * pen + (1 - a) * paper. Projecting a sample onto the paper -> pen segment gives the
coverage a, and the coverage-weighted centroid of a column is the centre of the inked area in that
column, which for a straight line is exactly the line's position at the column centre. Samples far off
the paper -> pen segment (a printed grid line, another pen crossing) are given no weight, because
their projection would be a false coverage.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.pen_likelihood import PenColourModel, table_pen_score
from tracedesk.science.pen_runs import ColumnSampler, PenRuns, ragged_samples

FloatArray = NDArray[np.float64]
IndexArray = NDArray[np.intp]

# Partly covered pixels just outside the run can miss the colour tolerance; they still carry coverage.
EDGE_SAMPLES = 2
# Distance from the paper -> pen segment (as a fraction of its length) where the weight starts to fall,
# and where it reaches zero: JPEG noise stays well inside, grid and other pens land well outside.
OFF_LINE_FULL_WEIGHT = 0.15
OFF_LINE_NO_WEIGHT = 0.30
# A sample next to the run this far off the mixture line and this far from the paper (as fractions of
# the paper -> pen distance) is something else drawn over or under the pen: another pen crossing it.
FOREIGN_OFF_LINE = 0.30
FOREIGN_STRENGTH = 0.60


@dataclass(frozen=True)
class ColumnCentres:
    """Refined pen position per column (valid where ``found``).

    Attributes
    ----------
    found : numpy.ndarray of bool, shape (n_columns,)
    centre : numpy.ndarray, shape (n_columns,)
        Position along the column in sample units; sample k covers [k, k + 1), centre k + 0.5.
    coverage : numpy.ndarray, shape (n_columns,)
        Sum of coverage weights across the column (sample units): the inked length in the column.
    peak_score : numpy.ndarray, shape (n_columns,)
        Best pen score in the run, in [0, 1].
    touches_foreign : numpy.ndarray of bool, shape (n_columns,)
        A strong colour that is neither pen nor paper borders the run (e.g. a crossing pen): part of
        the line may be hidden, so the centroid may be off.
    pen_rgb, paper_rgb : numpy.ndarray, shape (3,)
        Colours used for the coverage estimate (0-255 scale).
    """

    found: NDArray[np.bool_]
    centre: FloatArray
    coverage: FloatArray
    peak_score: FloatArray
    touches_foreign: NDArray[np.bool_]
    pen_rgb: FloatArray
    paper_rgb: FloatArray


@dataclass(frozen=True)
class MixtureFit:
    """Each sample seen as paper + a * (pen - paper) + residual, all as fractions of |pen - paper|."""

    along: FloatArray
    off_line: FloatArray
    strength: FloatArray


def fit_mixture(rgb: NDArray[np.uint8] | FloatArray, *, pen_rgb: FloatArray, paper_rgb: FloatArray) -> MixtureFit:
    """Project (n, 3) samples (0-255 scale) onto the paper -> pen segment."""
    direction = pen_rgb - paper_rgb
    length = max(float(np.sqrt(direction @ direction)), 1.0)
    offset = rgb - paper_rgb
    along = offset @ direction / length**2
    distance_sq = np.einsum("ij,ij->i", offset, offset)
    # Pythagoras instead of a second projection: |offset|^2 = (along * length)^2 + off_line^2.
    off_line_sq = np.maximum(distance_sq - (along * length) ** 2, 0.0)
    return MixtureFit(along, np.sqrt(off_line_sq) / length, np.sqrt(distance_sq) / length)


def _weights_of(fit: MixtureFit) -> FloatArray:
    on_line = np.clip((OFF_LINE_NO_WEIGHT - fit.off_line) / (OFF_LINE_NO_WEIGHT - OFF_LINE_FULL_WEIGHT), 0.0, 1.0)
    return np.clip(fit.along, 0.0, 1.0) * on_line


def coverage_weights(rgb: NDArray[np.uint8] | FloatArray, *, pen_rgb: FloatArray, paper_rgb: FloatArray) -> FloatArray:
    """Ink coverage in [0, 1] of each (n, 3) sample, zero for samples far off the paper -> pen mixture."""
    if float(np.sum((pen_rgb - paper_rgb) ** 2)) < 1.0:
        return np.zeros(len(rgb))
    return _weights_of(fit_mixture(rgb, pen_rgb=pen_rgb, paper_rgb=paper_rgb))


def refine_centres(sampler: ColumnSampler, model: PenColourModel, runs: PenRuns) -> ColumnCentres:
    """Coverage-weighted centroid of every found run, widened by two edge samples on each side."""
    columns = np.flatnonzero(runs.found)
    lo = np.maximum(runs.start[columns] - EDGE_SAMPLES, 0)
    hi = np.minimum(runs.stop[columns] + EDGE_SAMPLES, sampler.n_positions)
    samples = ragged_samples(columns, lo, hi)
    rgb, inside = sampler.sample_precise(samples.columns, samples.positions)
    score = np.where(inside, table_pen_score(rgb, model), 0.0)
    group = np.repeat(np.arange(len(columns)), hi - lo)
    peak_index = _index_of_group_maximum(score, hi - lo)
    pen_rgb = np.asarray(np.median(rgb[peak_index], axis=0), dtype=np.float64) if len(columns) else runs.paper_rgb
    fit = fit_mixture(rgb, pen_rgb=pen_rgb, paper_rgb=runs.paper_rgb)
    weight = _weights_of(fit) * inside
    # Where no sample sits on the mixture line (pen colour equals paper?), fall back to score weights.
    weight = np.where(_group_sum(weight, group, len(columns))[group] <= 0.0, score, weight)
    weight_sum = _group_sum(weight, group, len(columns))
    moment = _group_sum(weight * (samples.positions + 0.5), group, len(columns))
    foreign = (fit.off_line > FOREIGN_OFF_LINE) & (fit.strength > FOREIGN_STRENGTH) & (score == 0.0) & inside
    # A run with no weight at all (every sample off the sheet or off the pen-paper line) gives no centre:
    # the column is dropped (a gap) rather than given a NaN vertex.
    weighted = weight_sum > 0.0
    centre = np.divide(moment, weight_sum, out=np.full_like(moment, np.nan), where=weighted)
    centres = _scatter(sampler.n_columns, columns, centre, weight_sum, score[peak_index], pen_rgb, runs.paper_rgb)
    centres.touches_foreign[columns] = _group_sum(foreign.astype(np.float64), group, len(columns)) > 0
    centres.found[columns[~weighted]] = False
    return centres


def _group_sum(values: FloatArray, group: IndexArray, n_groups: int) -> FloatArray:
    return np.bincount(group, weights=values, minlength=n_groups).astype(np.float64)


def _index_of_group_maximum(values: FloatArray, lengths: IndexArray) -> IndexArray:
    """Index of the (first) largest value within each contiguous, non-empty group of given lengths."""
    starts = np.cumsum(lengths) - lengths
    group_max = np.maximum.reduceat(values, starts)
    candidates = np.where(values == np.repeat(group_max, lengths), np.arange(len(values)), len(values))
    return np.asarray(np.minimum.reduceat(candidates, starts), dtype=np.intp)


def _scatter(
    n_columns: int,
    columns: IndexArray,
    centre: FloatArray,
    coverage: FloatArray,
    peak: FloatArray,
    pen_rgb: FloatArray,
    paper_rgb: FloatArray,
) -> ColumnCentres:
    found = np.zeros(n_columns, dtype=bool)
    found[columns] = True
    full_centre, full_coverage, full_peak = np.full(n_columns, np.nan), np.zeros(n_columns), np.zeros(n_columns)
    full_centre[columns], full_coverage[columns], full_peak[columns] = centre, coverage, peak
    touches = np.zeros(n_columns, dtype=bool)
    return ColumnCentres(found, full_centre, full_coverage, full_peak, touches, pen_rgb, paper_rgb)
