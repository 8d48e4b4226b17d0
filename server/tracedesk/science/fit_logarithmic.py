"""Logarithmic model ``y = a + b ln(x)`` for ``x > 0``: linear least squares in the basis ``1, ln x``."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_inputs import (
    DEFAULT_CV_FOLDS,
    FloatArray,
    check_fold_count,
    check_positive_x,
    check_samples,
    distinct_count,
)
from tracedesk.science.fit_linear import LongArray, solve_linear_least_squares, summarise_linear_solution
from tracedesk.science.fit_result import FitResult


@dataclass(frozen=True)
class LogarithmicModel:
    """``a + b ln(x)``; NaN where ``x <= 0``."""

    intercept: float
    slope: float
    internal_covariance: FloatArray | None

    def evaluate(self, x: FloatArray) -> FloatArray:
        """Model value at ``x`` (``y`` units)."""
        return self.intercept + self.slope * _safe_log(x)

    def parameter_gradient(self, x: FloatArray) -> FloatArray:
        """Columns ``1, ln x``."""
        return np.column_stack([np.ones_like(x), _safe_log(x)])


def _safe_log(x: FloatArray) -> FloatArray:
    with np.errstate(invalid="ignore", divide="ignore"):
        values: FloatArray = np.where(x > 0, np.log(np.where(x > 0, x, 1.0)), np.nan)
    return values


def fit_logarithmic(
    x: ArrayLike,
    y: ArrayLike,
    *,
    sigma: ArrayLike | None = None,
    cv_folds: int = DEFAULT_CV_FOLDS,
    absolute_sigma: bool = False,
) -> FitResult:
    """Weighted least squares ``y = a + b ln(x)``.

    Parameters
    ----------
    x, y : array_like
        Samples with ``x > 0``; ``a`` and ``b`` are in ``y`` units (``x`` enters through ``ln x``).
    sigma, cv_folds, absolute_sigma
        As for :func:`tracedesk.science.fit_polynomial.fit_polynomial`.
    """
    samples = check_samples(x, y, sigma, minimum=3)
    check_positive_x(samples, family="logarithmic")
    folds = check_fold_count(cv_folds)
    if distinct_count(np.sort(samples.x)) < 2:
        raise ScienceInputError("the logarithmic model needs samples at 2 or more distinct x values")

    def basis(values: FloatArray, out: FloatArray) -> None:
        out[:, 0] = 1.0
        out[:, 1] = np.log(values)

    def extended_basis(values: LongArray) -> LongArray:
        return np.column_stack([np.ones_like(values), np.log(values)])

    solution = solve_linear_least_squares(
        samples,
        basis,
        columns=2,
        extended_basis=extended_basis,
        folds=folds,
        rank_message="the samples cannot determine a logarithmic model (too few distinct x)",
    )
    summary = summarise_linear_solution(samples, solution, absolute_sigma=absolute_sigma)
    intercept, slope = (float(value) for value in solution.coefficients)
    errors = np.sqrt(np.maximum(np.diag(summary.covariance), 0.0))
    return FitResult(
        family="logarithmic",
        parameters={"a": intercept, "b": slope},
        standard_errors={"a": float(errors[0]), "b": float(errors[1])},
        parameter_names=("a", "b"),
        covariance=summary.covariance,
        stats=summary.stats,
        domain=(float(samples.x.min()), float(samples.x.max())),
        warnings=(),
        options={"cv_folds": folds, "absolute_sigma": absolute_sigma},
        model=LogarithmicModel(intercept, slope, summary.covariance),
        noise_variance_factor=summary.variance_factor,
        typical_sigma=summary.typical_sigma,
        independent_covariance=summary.estimate.independent,
    )
