"""Cubic smoothing spline with the smoothing chosen by generalised cross-validation (GCV).

``scipy.interpolate.make_smoothing_spline`` with ``lam=None`` minimises
``sum w_i (y_i - f(x_i))^2 + lam * integral f''(u)^2 du`` with ``lam`` chosen by GCV (Wahba,
*Spline Models for Observational Data*, 1990, ch. 4). SciPy does not return ``lam``; it is recovered
exactly from the fitted spline: the natural smoothing spline's third derivative jumps at each sample
by ``w_i (y_i - f(x_i)) / lam`` (Green & Silverman, *Nonparametric Regression and Generalized Linear
Models*, 1994, sec. 2.3; from memory, checked numerically in the tests).

With ``lam`` fixed the spline is linear in ``y``: ``c = S y``. Solving for all unit vectors at once
gives ``S``, hence the hat matrix trace (effective number of parameters), the residual degrees of
freedom, and the coefficient covariance for bands: ``s^2 S W^-1 S^T`` for independent errors, or the
serial-correlation-robust sandwich of :mod:`tracedesk.science.fit_covariance` when that is larger.
The bands are frequentist (they ignore smoothing bias; a warning says so). Beyond
:data:`SPLINE_COVARIANCE_LIMIT` samples the trace is estimated with random probes (Hutchinson's
estimator, fixed seed) and no band is offered.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Final

import numpy as np
from numpy.typing import ArrayLike
from scipy.interpolate import BSpline, make_smoothing_spline

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_covariance import serial_robust_covariance
from tracedesk.science.fit_inputs import (
    DEFAULT_CV_FOLDS,
    DuplicateGroups,
    FloatArray,
    MergedSamples,
    Samples,
    check_fold_count,
    check_samples,
    fold_indices,
    merge_duplicate_x,
)
from tracedesk.science.fit_result import FitResult
from tracedesk.science.fit_stats import (
    noise_variance_factor,
    residual_spread,
    summary_statistics,
    weighted_r_squared,
)

SPLINE_COVARIANCE_LIMIT: Final = 2000
# SciPy's GCV search runs Python loops over the samples (about 1 ms per sample): cap the request time.
SPLINE_SAMPLE_LIMIT: Final = 5000
TRACE_PROBES: Final = 32
MINIMUM_SPLINE_SAMPLES: Final = 5


@dataclass(frozen=True)
class SplineModel:
    """A cubic B-spline with the covariance of its coefficients (None for very large fits)."""

    knots: FloatArray
    coefficients: FloatArray
    internal_covariance: FloatArray | None

    def evaluate(self, x: FloatArray) -> FloatArray:
        """Spline value at ``x`` (``y`` units); cubic continuation outside the knots."""
        values: FloatArray = BSpline(self.knots, self.coefficients, 3, extrapolate=True)(x)
        return values

    def parameter_gradient(self, x: FloatArray) -> FloatArray:
        """B-spline basis values at ``x`` (dense, ``len(x)`` by number of coefficients)."""
        matrix = BSpline.design_matrix(x, self.knots, 3, extrapolate=True)
        dense: FloatArray = matrix.toarray()
        return dense


def recovered_smoothing(spline: BSpline, merged: MergedSamples) -> float:
    """The ``lam`` a natural smoothing spline was fitted with, from its third-derivative jumps."""
    midpoints = (merged.x[1:] + merged.x[:-1]) / 2.0
    third = spline.derivative(3)(midpoints)
    jumps = np.diff(np.concatenate([[0.0], third, [0.0]]))
    residual = merged.y - spline(merged.x)
    denominator = float(jumps @ jumps)
    if denominator == 0.0:
        return 0.0
    return max(0.0, float(np.sum(merged.weights**2 * residual * jumps)) / denominator)


def fit_spline(
    x: ArrayLike,
    y: ArrayLike,
    *,
    sigma: ArrayLike | None = None,
    smoothing: float | None = None,
    cv_folds: int = DEFAULT_CV_FOLDS,
    absolute_sigma: bool = False,
) -> FitResult:
    """Cubic smoothing spline through the samples, smoothing by GCV unless given.

    Parameters
    ----------
    x, y : array_like
        Samples, 5 to 5000 distinct ``x``; repeated ``x`` are merged into their weighted mean.
    sigma : array_like, optional
        Standard uncertainty of each ``y`` (``y`` units).
    smoothing : float, optional
        The penalty ``lam >= 0`` (``y^2 x^3`` units); None chooses it by GCV.
    cv_folds, absolute_sigma
        As for :func:`tracedesk.science.fit_polynomial.fit_polynomial`.

    Returns
    -------
    FitResult
        ``parameters`` is ``{"knots", "coefficients", "degree": 3, "smoothing"}``;
        ``standard_errors`` is ``{"coefficients": [...]}`` (NaN beyond 2000 distinct x).
    """
    samples = check_samples(x, y, sigma, minimum=MINIMUM_SPLINE_SAMPLES)
    folds = check_fold_count(cv_folds)
    merged = merge_duplicate_x(samples.x, samples.y, samples.weights)
    if merged.x.size < MINIMUM_SPLINE_SAMPLES:
        raise ScienceInputError(f"a smoothing spline needs at least 5 distinct x values, got {merged.x.size}")
    if merged.x.size > SPLINE_SAMPLE_LIMIT:
        raise ScienceInputError(
            f"a smoothing spline is limited to {SPLINE_SAMPLE_LIMIT} distinct x values, got {merged.x.size}; "
            "resample the trace onto a coarser grid first"
        )
    lam = _checked_smoothing(smoothing)
    spline = make_smoothing_spline(merged.x, merged.y, w=merged.weights**2, lam=lam)
    lam = recovered_smoothing(spline, merged) if lam is None else lam
    return _spline_result(samples, merged, spline, lam=lam, folds=folds, absolute_sigma=absolute_sigma)


def _checked_smoothing(smoothing: float | None) -> float | None:
    if smoothing is None:
        return None
    if isinstance(smoothing, bool) or not isinstance(smoothing, int | float) or not smoothing >= 0.0:
        raise ScienceInputError(f"smoothing must be a number >= 0, got {smoothing!r}")
    return float(smoothing)


def _spline_result(
    samples: Samples, merged: MergedSamples, spline: BSpline, *, lam: float, folds: int, absolute_sigma: bool
) -> FitResult:
    count = merged.x.size
    residual = merged.y - spline(merged.x)
    weighted_rss = float(np.sum((merged.weights * residual) ** 2))
    smoother = _coefficient_smoother(merged, lam) if count <= SPLINE_COVARIANCE_LIMIT else None
    effective = _hat_trace(merged, lam, smoother)
    factor = noise_variance_factor(weighted_rss=weighted_rss, dof=count - effective, absolute_sigma=absolute_sigma)
    estimate = None
    if smoother is not None:
        # c = S y = (S / w)(w y): influence rows (S / w)^T for the prewhitened Newey-West sandwich.
        influence = smoother / merged.weights
        classical = factor * influence @ influence.T
        estimate = serial_robust_covariance(
            influence.T,
            merged.weights * residual,
            merged.x,
            bread=np.eye(influence.shape[0]),
            classical=classical,
            parameter_count=effective,
        )
    covariance = None if estimate is None else estimate.matrix
    stats = summary_statistics(
        count=count,
        parameter_count=effective,
        weighted_rss=weighted_rss,
        # Every original sample, so the scatter within merged duplicates counts too (pooled SD).
        residuals=residual_spread(samples, samples.y - spline(samples.x)),
        r_squared=weighted_r_squared(merged.y, merged.weights, weighted_rss=weighted_rss),
        cv_rmse=_cross_validated_rmse(merged, lam, folds=folds),
        condition_number=math.nan,
        scale=float(np.max(np.abs(merged.y * merged.weights))),
    )
    stats["condition_number"] = None
    if estimate is not None:
        stats.update(estimate.stats())
    knots, coefficients = np.asarray(spline.t, dtype=np.float64), np.asarray(spline.c, dtype=np.float64)
    errors = np.full(coefficients.size, np.nan) if covariance is None else np.sqrt(np.maximum(np.diag(covariance), 0))
    parameters: dict[str, Any] = {
        "knots": knots.tolist(),
        "coefficients": coefficients.tolist(),
        "degree": 3,
        "smoothing": lam,
    }
    return FitResult(
        family="spline",
        parameters=parameters,
        standard_errors={"coefficients": errors.tolist()},
        parameter_names=tuple(f"coefficient{k}" for k in range(coefficients.size)),
        covariance=covariance,
        stats=stats,
        domain=(float(merged.x[0]), float(merged.x[-1])),
        warnings=tuple(_spline_warnings(merged, covariance)),
        options={"smoothing": lam, "cv_folds": folds, "absolute_sigma": absolute_sigma},
        model=SplineModel(knots, coefficients, covariance),
        noise_variance_factor=factor,
        typical_sigma=float(np.sqrt(np.mean(1.0 / merged.weights**2))),
        independent_covariance=None if estimate is None else estimate.independent,
    )


def spline_response(x: FloatArray, weights: FloatArray, shifts: FloatArray, *, smoothing: float) -> FloatArray:
    """Shift of the spline coefficients per column of ``shifts`` (sample ``y`` shifts), smoothing held fixed.

    With ``lam`` fixed the smoothing spline is linear in ``y`` (``c = S y``), so a shift of every sample
    moves the coefficients by the spline of that shift, merged over repeated ``x`` like the samples. The
    GCV choice of ``lam`` also depends on ``y``; that second-order effect is left out.

    Parameters
    ----------
    x, weights : ndarray, shape (n,)
        The samples' abscissae and fit weights ``1 / sigma`` (in the rows' order of ``shifts``).
    shifts : ndarray, shape (n, m)
        ``y`` shifts (``y`` units), one column per source.
    smoothing : float
        The fit's ``lam``.

    Returns
    -------
    ndarray, shape (coefficients, m)
    """
    groups = DuplicateGroups.of(x, weights)
    ordered_x = x[groups.order]
    merged_x = ordered_x if groups.starts is None else ordered_x[groups.starts]
    unit = make_smoothing_spline(merged_x, groups.merge(shifts), w=groups.merged_weights() ** 2, lam=smoothing)
    response: FloatArray = np.asarray(unit.c, dtype=np.float64)
    return response


def _coefficient_smoother(merged: MergedSamples, lam: float) -> FloatArray:
    """Matrix ``S`` with spline coefficients ``c = S y`` for fixed ``lam``."""
    unit = make_smoothing_spline(merged.x, np.eye(merged.x.size), w=merged.weights**2, lam=lam)
    smoother: FloatArray = np.asarray(unit.c, dtype=np.float64)
    return smoother


def _hat_trace(merged: MergedSamples, lam: float, smoother: FloatArray | None) -> float:
    """Trace of the hat matrix ``B S``: exact from ``S``, else Hutchinson's estimate."""
    design = BSpline.design_matrix(merged.x, _knots_of(merged), 3)
    if smoother is not None:
        return float(design.multiply(smoother.T).sum())
    probes = np.random.default_rng(20240601).choice([-1.0, 1.0], size=(merged.x.size, TRACE_PROBES))
    response = make_smoothing_spline(merged.x, probes, w=merged.weights**2, lam=lam)
    fitted = design @ np.asarray(response.c)
    return float(np.mean(np.sum(probes * fitted, axis=0)))


def _knots_of(merged: MergedSamples) -> FloatArray:
    """Knot vector scipy uses for a smoothing spline: the samples, with the ends repeated 3 more times."""
    knots: FloatArray = np.concatenate([np.full(3, merged.x[0]), merged.x, np.full(3, merged.x[-1])])
    return knots


def _cross_validated_rmse(merged: MergedSamples, lam: float, *, folds: int) -> float | None:
    """k-fold CV with ``lam`` held at the full-data value."""
    squared_error = 0.0
    for held_out in fold_indices(merged.x, folds=min(folds, merged.x.size)):
        keep = np.ones(merged.x.size, dtype=bool)
        keep[held_out] = False
        if np.count_nonzero(keep) < MINIMUM_SPLINE_SAMPLES:
            return None
        spline = make_smoothing_spline(merged.x[keep], merged.y[keep], w=merged.weights[keep] ** 2, lam=lam)
        error = merged.weights[held_out] * (merged.y[held_out] - spline(merged.x[held_out]))
        squared_error += float(error @ error)
    return math.sqrt(squared_error / float(np.sum(merged.weights**2)))


def _spline_warnings(merged: MergedSamples, covariance: FloatArray | None) -> list[str]:
    messages: list[str] = []
    if merged.merged_count:
        messages.append(f"{merged.merged_count} samples shared an x with another and were averaged.")
    if covariance is None:
        messages.append(
            f"With more than {SPLINE_COVARIANCE_LIMIT} distinct x the spline carries no covariance, "
            "so no confidence or prediction band is available."
        )
    else:
        messages.append("Spline bands show sampling uncertainty only; they ignore the bias smoothing introduces.")
    return messages
