"""Agreement of two digitizations of one pen line: maximum and RMS difference over their common x range.

Pure numpy. Each trace is read as the piecewise-linear function through its samples (sorted by x; samples with
equal x are averaged). Both functions are evaluated at every breakpoint of either inside the common range, where
their difference is again piecewise linear, so:

- the maximum absolute difference is attained at one of those breakpoints (exact, no sampling error), and
- the RMS difference is the exact root of the mean of the squared difference over the range: on a segment of
  width h whose ends differ by d0 and d1 the integral of the squared difference is h (d0² + d0 d1 + d1²) / 3.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

FloatArray = NDArray[np.float64]


@dataclass(frozen=True)
class TraceAgreement:
    """How far two traces of one pen line differ, in the value unit of the traces.

    Attributes
    ----------
    start, stop : float
        The common x range (x units).
    points : int
        Breakpoints compared (both traces' samples inside the range, plus its ends).
    max_difference : float
        Largest |first - second| over the range (value units).
    max_at : float
        x where it occurs (the first such x).
    rms_difference : float
        Root-mean-square of first - second over the range, integrated exactly (value units).
    """

    start: float
    stop: float
    points: int
    max_difference: float
    max_at: float
    rms_difference: float

    def agrees(self, *, tolerance: float) -> bool:
        """True when the largest difference is within ``tolerance`` (value units)."""
        return self.max_difference <= tolerance


def piecewise_linear_samples(x: ArrayLike, y: ArrayLike) -> tuple[FloatArray, FloatArray]:
    """Finite samples sorted by x, with the y values of equal x averaged (a function of x)."""
    xs = np.asarray(x, dtype=np.float64).ravel()
    ys = np.asarray(y, dtype=np.float64).ravel()
    if xs.shape != ys.shape:
        raise ValueError(f"x and y differ in length ({xs.size} and {ys.size})")
    keep = np.isfinite(xs) & np.isfinite(ys)
    unique_x, inverse = np.unique(xs[keep], return_inverse=True)
    sums = np.bincount(inverse, weights=ys[keep], minlength=unique_x.size)
    counts = np.bincount(inverse, minlength=unique_x.size)
    return unique_x, sums / np.maximum(counts, 1)


def compare_traces(
    first_x: ArrayLike, first_y: ArrayLike, second_x: ArrayLike, second_y: ArrayLike
) -> TraceAgreement | None:
    """Compare two traces over their common x range; None when they share no range of positive width.

    Parameters
    ----------
    first_x, first_y, second_x, second_y : array_like
        Samples of each trace (x units, value units), in any order; non-finite samples are ignored.
    """
    x1, y1 = piecewise_linear_samples(first_x, first_y)
    x2, y2 = piecewise_linear_samples(second_x, second_y)
    if x1.size < 2 or x2.size < 2:
        return None
    start, stop = max(x1[0], x2[0]), min(x1[-1], x2[-1])
    if not stop > start:
        return None
    grid = np.union1d(np.concatenate([x1, x2]), [start, stop])
    grid = grid[(grid >= start) & (grid <= stop)]
    difference = np.interp(grid, x1, y1) - np.interp(grid, x2, y2)
    worst = int(np.argmax(np.abs(difference)))
    widths = np.diff(grid)
    d0, d1 = difference[:-1], difference[1:]
    integral = float(np.sum(widths * (d0 * d0 + d0 * d1 + d1 * d1) / 3.0))
    return TraceAgreement(
        start=float(start),
        stop=float(stop),
        points=int(grid.size),
        max_difference=float(abs(difference[worst])),
        max_at=float(grid[worst]),
        rms_difference=float(np.sqrt(integral / (stop - start))),
    )
