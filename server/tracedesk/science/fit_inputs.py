"""Checking and normalising the samples and options handed to the fitting functions.

Every fitting family receives samples as ``x`` (abscissa, chart units, often elapsed hours), ``y``
(ordinate, chart units) and optional ``sigma`` (one standard uncertainty per sample, ``y`` units).
The checks here turn anything unusable into a :class:`ScienceInputError` whose message names the
problem, so the API layer can show it to the person who traced the line.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np
from numpy.typing import ArrayLike, NDArray

from tracedesk.science.errors import ScienceInputError

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]

DEFAULT_CV_FOLDS: Final = 5


@dataclass(frozen=True)
class Samples:
    """Validated samples: finite ``x`` and ``y``, and weights ``1 / sigma`` (1 without sigma)."""

    x: FloatArray
    y: FloatArray
    weights: FloatArray
    weighted: bool

    @property
    def count(self) -> int:
        """Number of samples."""
        return int(self.x.size)


def as_finite_vector(values: ArrayLike, *, field: str) -> FloatArray:
    """Return ``values`` as a 1-D float array, refusing NaN, infinity and non-numbers.

    Parameters
    ----------
    values : array_like
        Numbers in any units.
    field : str
        Name used in the error message, e.g. ``"x"``.
    """
    try:
        array = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as error:
        raise ScienceInputError(f"{field} must be numbers") from error
    if array.ndim != 1:
        raise ScienceInputError(f"{field} must be a one-dimensional list of numbers")
    bad = np.flatnonzero(~np.isfinite(array))
    if bad.size:
        raise ScienceInputError(f"{field} contains NaN or infinity at index {int(bad[0])}")
    return array


def check_samples(x: ArrayLike, y: ArrayLike, sigma: ArrayLike | None, *, minimum: int) -> Samples:
    """Validate samples for a fit that needs at least ``minimum`` of them.

    Parameters
    ----------
    x, y : array_like
        Sample abscissae and ordinates (chart units).
    sigma : array_like or None
        Standard uncertainty of each ``y`` (``y`` units, > 0), or None for equal weights.
    minimum : int
        Fewest samples the model can be fitted to with at least one residual degree of freedom.
    """
    x_values = as_finite_vector(x, field="x")
    y_values = as_finite_vector(y, field="y")
    if x_values.size != y_values.size:
        raise ScienceInputError(f"x and y have different lengths ({x_values.size} and {y_values.size})")
    if x_values.size < minimum:
        raise ScienceInputError(f"this fit needs at least {minimum} samples, got {x_values.size}")
    if sigma is None:
        # A read-only broadcast view of ones: no memory, and any attempt to write to it fails loudly.
        return Samples(x_values, y_values, np.broadcast_to(np.float64(1.0), x_values.shape), weighted=False)
    sigma_values = as_finite_vector(sigma, field="sigma")
    if sigma_values.size != x_values.size:
        raise ScienceInputError(f"sigma has {sigma_values.size} values for {x_values.size} samples")
    bad = np.flatnonzero(sigma_values <= 0.0)
    if bad.size:
        raise ScienceInputError(f"sigma must be positive (index {int(bad[0])} is {sigma_values[bad[0]]:g})")
    return Samples(x_values, y_values, 1.0 / sigma_values, weighted=True)


def check_positive_x(samples: Samples, *, family: str) -> None:
    """Refuse samples with ``x <= 0`` for families that take ``ln(x)`` or ``x ** b``."""
    bad = np.flatnonzero(samples.x <= 0.0)
    if bad.size:
        raise ScienceInputError(
            f"the {family} model needs x > 0 (it takes the logarithm of x); "
            f"{bad.size} sample(s) have x <= 0, the first at index {int(bad[0])}"
        )


def check_degree(value: object, *, family: str, maximum: int, minimum: int = 0) -> int:
    """Return ``value`` as an integer degree in ``[minimum, maximum]`` or raise."""
    if isinstance(value, bool) or not isinstance(value, int | float) or not float(value).is_integer():
        raise ScienceInputError(f"{family} degree must be a whole number, got {value!r}")
    degree = int(value)
    if not minimum <= degree <= maximum:
        raise ScienceInputError(f"{family} degree must be between {minimum} and {maximum}, got {degree}")
    return degree


def check_positive_number(value: object, *, name: str) -> float:
    """Return ``value`` as a finite float > 0 or raise naming ``name``."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ScienceInputError(f"{name} must be a number, got {value!r}")
    number = float(value)
    if not math.isfinite(number) or number <= 0.0:
        raise ScienceInputError(f"{name} must be positive and finite, got {number:g}")
    return number


def check_fold_count(value: object) -> int:
    """Return the number of cross-validation folds (an integer >= 2)."""
    if isinstance(value, bool) or not isinstance(value, int) or value < 2:
        raise ScienceInputError(f"cv_folds must be a whole number of at least 2, got {value!r}")
    return value


def check_level(level: float) -> float:
    """Return a band confidence level strictly between 0 and 1."""
    if not (isinstance(level, int | float) and 0.0 < float(level) < 1.0):
        raise ScienceInputError(f"level must be between 0 and 1 (e.g. 0.95), got {level!r}")
    return float(level)


def distinct_count(values: FloatArray) -> int:
    """Number of distinct values in ``values``."""
    if bool(np.all(values[1:] >= values[:-1])):  # traces usually arrive sorted: skip the sort
        return 1 + int(np.count_nonzero(values[1:] != values[:-1]))
    return int(np.unique(values).size)


FoldIndex = slice | NDArray[np.intp]


def fold_indices(x: FloatArray, *, folds: int) -> list[FoldIndex]:
    """Deterministic cross-validation folds: every ``folds``-th sample in order of increasing ``x``.

    Interleaving by rank (rather than contiguous blocks) keeps every fold spread over the whole traced
    range, so the held-out samples test interpolation between neighbours, not extrapolation. Traces
    usually arrive sorted; then the folds are plain strided slices (no sort, no gather).
    """
    if bool(np.all(x[1:] >= x[:-1])):
        return [slice(start, None, folds) for start in range(folds)]
    order = np.argsort(x, kind="stable")
    return [order[start::folds] for start in range(folds)]


@dataclass(frozen=True)
class MergedSamples:
    """Samples sorted by ``x`` with repeated ``x`` merged into one weighted mean each."""

    x: FloatArray
    y: FloatArray
    weights: FloatArray
    merged_count: int


def merge_duplicate_x(x: FloatArray, y: FloatArray, weights: FloatArray) -> MergedSamples:
    """Sort by ``x`` and replace samples sharing an ``x`` by their inverse-variance weighted mean.

    ``weights`` are ``1 / sigma``; the merged weight is ``sqrt(sum w^2)``, the uncertainty of the
    weighted mean. ``merged_count`` is how many samples disappeared into others.
    """
    groups = DuplicateGroups.of(x, weights)
    xs = x[groups.order]
    if groups.starts is None:
        return MergedSamples(xs, y[groups.order], weights[groups.order], 0)
    means = groups.merge(y)
    return MergedSamples(xs[groups.starts], means, groups.merged_weights(), int(xs.size - groups.starts.size))


@dataclass(frozen=True)
class DuplicateGroups:
    """The sort by ``x`` and the runs of equal ``x`` that :func:`merge_duplicate_x` merges.

    Kept as an object so that any quantity linear in ``y`` (a shift of every sample, a column per
    calibration input) can be merged exactly as the samples were.
    """

    order: NDArray[np.intp]
    starts: NDArray[np.intp] | None  # first index of each run in sorted order; None: no duplicates
    squared_weights: FloatArray  # w^2 in sorted order

    @classmethod
    def of(cls, x: FloatArray, weights: FloatArray) -> DuplicateGroups:
        order = np.argsort(x, kind="stable")
        xs, ws = x[order], weights[order]
        starts = np.flatnonzero(np.r_[True, np.diff(xs) != 0.0])
        return cls(order, None if starts.size == xs.size else starts, ws * ws)

    def merge(self, values: FloatArray) -> FloatArray:
        """Weighted means of ``values`` (shape ``(n,)`` or ``(n, m)``, in the samples' original order)."""
        ordered = values[self.order]
        if self.starts is None:
            return ordered
        squared = self.squared_weights if ordered.ndim == 1 else self.squared_weights[:, None]
        merged: FloatArray = np.add.reduceat(squared * ordered, self.starts, axis=0)
        total = np.add.reduceat(self.squared_weights, self.starts)
        return merged / (total if merged.ndim == 1 else total[:, None])

    def merged_weights(self) -> FloatArray:
        """``sqrt(sum w^2)`` per run: ``1 / sigma`` of each weighted mean."""
        if self.starts is None:
            return np.sqrt(self.squared_weights)
        return np.sqrt(np.add.reduceat(self.squared_weights, self.starts))
