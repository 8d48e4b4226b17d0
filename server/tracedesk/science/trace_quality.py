"""What a traced line says about itself: pen width, per-vertex confidence, and the gaps in it."""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]

# Inked length within this factor of the expected one counts as a normal stretch of line.
WIDTH_RATIO_LOW = 0.5
WIDTH_RATIO_HIGH = 1.5
# Pen score (1 - dE / tolerance) from which the colour alone leaves no doubt.
COLOUR_SCORE_SURE = 0.5
OCCLUDED_FACTOR = 0.5


def local_slope(across: FloatArray, along: FloatArray, *, reach: int = 1) -> FloatArray:
    """d(along) / d(across) at each vertex, from the vertices ``reach`` places before and after
    (fewer at the ends). A longer reach steps over the wobble of centroids inside an ink blot."""
    n = len(across)
    if n < 2:
        return np.zeros(n)
    index = np.arange(n)
    before = np.maximum(index - reach, 0)
    after = np.minimum(index + reach, n - 1)
    return np.asarray((along[after] - along[before]) / (across[after] - across[before]), dtype=np.float64)


def estimate_line_width(coverage: FloatArray, slope: FloatArray) -> float:
    """Pen width (px) across the line: median of the inked length per column times cos(line angle).

    A line of width w crossing a one-pixel column at slope s inks w * sqrt(1 + s^2) of it.
    """
    if len(coverage) == 0:
        return 0.0
    return float(np.median(coverage / np.sqrt(1.0 + slope**2)))


def vertex_confidence(
    *,
    peak_score: FloatArray,
    coverage: FloatArray,
    slope: FloatArray,
    line_width_px: float,
    touches_foreign: BoolArray,
) -> FloatArray:
    """Confidence in [0, 1]: how pen-like the best pixel is, times how line-like the inked length is,
    halved where something else (a crossing pen) borders the pen and may hide part of it.

    Ink blots (far more ink than the width and slope explain) and faint, broken stretches (far less)
    lose confidence; the colour term comes from the CIEDE2000 score.
    """
    expected = max(line_width_px, 1e-6) * np.sqrt(1.0 + slope**2)
    ratio = np.maximum(coverage / expected, 1e-12)
    shape_term = np.clip(np.minimum(ratio / WIDTH_RATIO_LOW, WIDTH_RATIO_HIGH / ratio), 0.0, 1.0)
    # A pixel within half the tolerance is surely pen; confidence falls from there to the tolerance.
    colour_term = np.clip(peak_score / COLOUR_SCORE_SURE, 0.0, 1.0)
    occlusion_term = np.where(touches_foreign, OCCLUDED_FACTOR, 1.0)
    return np.asarray(np.clip(colour_term * shape_term * occlusion_term, 0.0, 1.0), dtype=np.float64)


def gap_spans(found: BoolArray, column_edges: FloatArray) -> list[tuple[float, float]]:
    """Runs of columns without pen as (start, end) coordinates of their outer column edges.

    Parameters
    ----------
    found : numpy.ndarray of bool, shape (n,)
        Whether each column has a vertex.
    column_edges : numpy.ndarray, shape (n + 1,)
        Coordinate of the edges between columns (px or degrees).
    """
    missing = np.concatenate([[False], ~found, [False]]).astype(np.int8)
    change = np.diff(missing)
    starts = np.flatnonzero(change == 1)
    stops = np.flatnonzero(change == -1)
    return [(float(column_edges[a]), float(column_edges[b])) for a, b in zip(starts, stops, strict=True)]
