"""Fourier series ``y = a0 + sum_k a_k cos(2 pi k x / P) + b_k sin(2 pi k x / P)``, k = 1..n.

With a known period ``P`` (``x`` units, e.g. 24 h) the model is linear and is solved by QR like the
polynomial. With an unknown period, :mod:`tracedesk.science.fit_period` finds it first (periodogram
grid search, then nonlinear refinement of all parameters together); the covariance then includes
the period, from the Jacobian of the full model at the optimum.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Final

import numpy as np
from numpy.typing import ArrayLike

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_covariance import CovarianceEstimate, jacobian_robust_covariance
from tracedesk.science.fit_fourier_basis import fourier_design, fourier_parameter_names, period_derivative
from tracedesk.science.fit_inputs import (
    DEFAULT_CV_FOLDS,
    FloatArray,
    Samples,
    check_degree,
    check_fold_count,
    check_positive_number,
    check_samples,
)
from tracedesk.science.fit_linear import (
    LinearSolution,
    LinearSummary,
    LongArray,
    solve_linear_least_squares,
    summarise_linear_solution,
)
from tracedesk.science.fit_period import estimate_period
from tracedesk.science.fit_result import FitResult

MAX_FOURIER_DEGREE: Final = 50


@dataclass(frozen=True)
class FourierModel:
    """A fitted Fourier series; ``period_estimated`` adds the period as the last internal parameter."""

    coefficients: FloatArray
    period: float
    period_estimated: bool
    internal_covariance: FloatArray | None

    def evaluate(self, x: FloatArray) -> FloatArray:
        """Series value at ``x`` (``y`` units)."""
        degree = (self.coefficients.size - 1) // 2
        values: FloatArray = fourier_design(x, degree=degree, period=self.period) @ self.coefficients
        return values

    def parameter_gradient(self, x: FloatArray) -> FloatArray:
        """Design columns, plus ``d f / d P`` when the period was estimated."""
        degree = (self.coefficients.size - 1) // 2
        design = fourier_design(x, degree=degree, period=self.period)
        if not self.period_estimated:
            return design
        return np.column_stack([design, period_derivative(x, self.coefficients, period=self.period)])


def solve_fourier_coefficients(samples: Samples, *, degree: int, period: float, folds: int) -> LinearSolution:
    """Linear least-squares Fourier coefficients ``(a0, a1, b1, ...)`` for a fixed ``period``."""

    def basis(values: FloatArray, out: FloatArray) -> None:
        fourier_design(values, degree=degree, period=period, out=out)

    def extended_basis(values: LongArray) -> LongArray:
        return fourier_design(values, degree=degree, period=period)

    return solve_linear_least_squares(
        samples,
        basis,
        columns=2 * degree + 1,
        extended_basis=extended_basis,
        folds=folds,
        rank_message=(
            f"the samples cover too few distinct phases to determine a degree {degree} Fourier series "
            f"with period {period:g}"
        ),
    )


def fit_fourier(
    x: ArrayLike,
    y: ArrayLike,
    *,
    degree: int,
    period: float | None = None,
    period_bounds: tuple[float, float] | None = None,
    sigma: ArrayLike | None = None,
    cv_folds: int = DEFAULT_CV_FOLDS,
    absolute_sigma: bool = False,
) -> FitResult:
    """Weighted least-squares Fourier series of ``degree`` harmonics.

    Parameters
    ----------
    x, y : array_like
        Samples (``x`` in the units of the period, e.g. hours).
    degree : int
        Number of harmonics ``n`` (0 to 50).
    period : float, optional
        Known period ``P`` (``x`` units, > 0). When omitted it is estimated and its uncertainty
        enters the covariance.
    period_bounds : (float, float), optional
        Range searched for an unknown period (``x`` units); default from the sample spacing up to
        the traced span.
    sigma, cv_folds, absolute_sigma
        As for :func:`tracedesk.science.fit_polynomial.fit_polynomial`.

    Returns
    -------
    FitResult
        ``parameters`` is ``{"a0", "a1", "b1", ..., "an", "bn", "period"}``.
    """
    degree = check_degree(degree, family="fourier", maximum=MAX_FOURIER_DEGREE)
    folds = check_fold_count(cv_folds)
    estimated = period is None
    samples = check_samples(x, y, sigma, minimum=2 * degree + 2 + int(estimated))
    if period is None:
        period = estimate_period(samples, degree=degree, bounds=period_bounds)
    elif period_bounds is not None:
        raise ScienceInputError("give either a period or period_bounds to search, not both")
    else:
        period = check_positive_number(period, name="period")
        if not math.isfinite(2.0 * math.pi / period):  # a subnormal period: its angular frequency overflows
            raise ScienceInputError(f"the period {period:g} is too small to fit a Fourier series with")
    solution = solve_fourier_coefficients(samples, degree=degree, period=period, folds=folds)
    summary = summarise_linear_solution(
        samples, solution, absolute_sigma=absolute_sigma, extra_parameters=int(estimated)
    )
    options = {
        "degree": degree,
        "period": None if estimated else period,
        "cv_folds": folds,
        "absolute_sigma": absolute_sigma,
    }
    return _fourier_result(samples, solution, summary, period=period, estimated=estimated, options=options)


def _fourier_result(
    samples: Samples,
    solution: LinearSolution,
    summary: LinearSummary,
    *,
    period: float,
    estimated: bool,
    options: dict[str, Any],
) -> FitResult:
    size = solution.coefficients.size + 1
    covariance = np.zeros((size, size))
    independent = np.zeros((size, size))
    stats = summary.stats
    if estimated:
        estimate = _covariance_with_period(samples, solution, period=period, factor=summary.variance_factor)
        covariance, independent, stats = estimate.matrix, estimate.independent, {**stats, **estimate.stats()}
    else:
        covariance[:-1, :-1] = summary.covariance
        independent[:-1, :-1] = summary.estimate.independent
    names = fourier_parameter_names((size - 2) // 2)
    errors = np.sqrt(np.maximum(np.diag(covariance), 0.0))
    return FitResult(
        family="fourier",
        parameters={name: float(v) for name, v in zip(names, [*solution.coefficients, period], strict=True)},
        standard_errors={name: float(v) for name, v in zip(names, errors, strict=True)},
        parameter_names=names,
        covariance=covariance,
        stats=stats,
        domain=(float(samples.x.min()), float(samples.x.max())),
        warnings=tuple(_coverage_warnings(samples, period=period, estimated=estimated)),
        options=options,
        model=FourierModel(solution.coefficients, period, estimated, covariance if estimated else summary.covariance),
        noise_variance_factor=summary.variance_factor,
        typical_sigma=summary.typical_sigma,
        independent_covariance=independent,
    )


def _covariance_with_period(
    samples: Samples, solution: LinearSolution, *, period: float, factor: float
) -> CovarianceEstimate:
    """Covariance over ``(a0, a1, b1, ..., period)`` from the weighted Jacobian of the full model."""
    degree = (solution.coefficients.size - 1) // 2
    design = fourier_design(samples.x, degree=degree, period=period)
    column = period_derivative(samples.x, solution.coefficients, period=period)
    jacobian = np.column_stack([design, column]) * samples.weights[:, None]
    residual = samples.weights * (samples.y - design @ solution.coefficients)
    # Same serial-correlation-robust sandwich as the known-period coefficients get.
    return jacobian_robust_covariance(jacobian, residual, samples.x, variance_factor=factor)


def _coverage_warnings(samples: Samples, *, period: float, estimated: bool) -> list[str]:
    messages: list[str] = []
    cycles = float(samples.x.max() - samples.x.min()) / period
    if cycles < 1.0:
        messages.append(
            f"The samples cover only {100 * cycles:.0f} % of one period; the coefficients are poorly "
            "determined and the series repeats a shape that was never traced."
        )
    if estimated:
        messages.append(
            "The period was estimated from the samples; its uncertainty is included in the covariance. "
            "The cross-validated RMSE holds the period at the full-data estimate."
        )
    return messages
