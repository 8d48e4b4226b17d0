"""Exponential ``y = a exp(b x) + c`` and power ``y = a x^b + c`` (x > 0) by nonlinear least squares.

Both are the same curve in different abscissae: the power law is the exponential in ``z = ln x``.
Internally the fit uses ``u = (z - centre) / scale`` in ``[-1, 1]`` and ``y = A exp(B u) + C``, which
keeps ``exp`` in range and the Jacobian columns comparable; the reported ``a, b, c`` and their
covariance follow by the exact reparametrisation (first-order propagation for the covariance).

Starting values come from the integral-equation linearisation: integrating ``y' = B (y - C)`` gives
``y(u) - y(u0) = B S(u) - B C (u - u0)`` with ``S`` the cumulative trapezoid integral of ``y``, a
linear regression for ``B`` that needs no guess (J. Jacquelin, "Regressions et equations
integrales", 2009; from memory). ``A`` and ``C`` then follow by linear least squares, and
``scipy.optimize.least_squares`` polishes all three; the covariance comes from its Jacobian.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np
from numpy.typing import ArrayLike
from scipy import integrate, optimize

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_covariance import jacobian_robust_covariance
from tracedesk.science.fit_inputs import (
    DEFAULT_CV_FOLDS,
    FloatArray,
    Samples,
    check_fold_count,
    check_positive_x,
    check_samples,
    distinct_count,
    fold_indices,
)
from tracedesk.science.fit_linear import typical_sigma
from tracedesk.science.fit_result import FitResult
from tracedesk.science.fit_stats import (
    StatsDict,
    condition_number,
    noise_variance_factor,
    residual_spread,
    summary_statistics,
    weighted_r_squared,
)

# |B| <= 700 keeps exp(B u) finite in float64 for |u| <= 1.
RATE_LIMIT: Final = 700.0
TOLERANCE: Final = 1e-13
# Evaluation budgets: a good start converges in tens of evaluations; more means a degenerate ridge.
MAX_EVALUATIONS: Final = 300
FOLD_EVALUATIONS: Final = 100
# Above this |correlation| between A and C the curvature is too weak to tell them apart.
DEGENERATE_CORRELATION: Final = 0.9999


@dataclass(frozen=True)
class ExponentialModel:
    """``A exp(B u) + C`` with ``u = (z - centre) / scale``, ``z = ln x`` when ``log_x`` else ``x``."""

    amplitude: float
    rate: float
    offset: float
    centre: float
    scale: float
    log_x: bool
    internal_covariance: FloatArray | None

    def scaled(self, x: FloatArray) -> FloatArray:
        """``u`` at ``x``; NaN where a power law is undefined (``x <= 0``)."""
        if self.log_x:
            with np.errstate(invalid="ignore", divide="ignore"):
                z = np.where(x > 0, np.log(np.where(x > 0, x, 1.0)), np.nan)
        else:
            z = x
        result: FloatArray = (z - self.centre) / self.scale
        return result

    def evaluate(self, x: FloatArray) -> FloatArray:
        """Model value at ``x`` (``y`` units)."""
        with np.errstate(over="ignore"):
            values: FloatArray = self.amplitude * np.exp(self.rate * self.scaled(x)) + self.offset
        return values

    def parameter_gradient(self, x: FloatArray) -> FloatArray:
        """Columns ``d f / d (A, B, C)``."""
        u = self.scaled(x)
        with np.errstate(over="ignore"):
            growth = np.exp(self.rate * u)
        return np.column_stack([growth, self.amplitude * u * growth, np.ones_like(u)])


def fit_exponential(
    x: ArrayLike,
    y: ArrayLike,
    *,
    sigma: ArrayLike | None = None,
    cv_folds: int = DEFAULT_CV_FOLDS,
    absolute_sigma: bool = False,
) -> FitResult:
    """Weighted nonlinear least squares ``y = a exp(b x) + c``.

    Parameters
    ----------
    x, y : array_like
        Samples; ``b`` is in ``1 / x`` units, ``a`` and ``c`` in ``y`` units. At least 4 samples at
        3 distinct ``x``.
    sigma, cv_folds, absolute_sigma
        As for :func:`tracedesk.science.fit_polynomial.fit_polynomial`.
    """
    samples = check_samples(x, y, sigma, minimum=4)
    return _fit_growth(
        samples, family="exponential", log_x=False, folds=check_fold_count(cv_folds), absolute_sigma=absolute_sigma
    )


def fit_power(
    x: ArrayLike,
    y: ArrayLike,
    *,
    sigma: ArrayLike | None = None,
    cv_folds: int = DEFAULT_CV_FOLDS,
    absolute_sigma: bool = False,
) -> FitResult:
    """Weighted nonlinear least squares ``y = a x^b + c`` for ``x > 0``.

    Parameters
    ----------
    x, y : array_like
        Samples with ``x > 0``; ``b`` is dimensionless, ``a`` in ``y / x^b`` units, ``c`` in ``y``.
    sigma, cv_folds, absolute_sigma
        As for :func:`tracedesk.science.fit_polynomial.fit_polynomial`.
    """
    samples = check_samples(x, y, sigma, minimum=4)
    check_positive_x(samples, family="power")
    return _fit_growth(
        samples, family="power", log_x=True, folds=check_fold_count(cv_folds), absolute_sigma=absolute_sigma
    )


def _fit_growth(samples: Samples, *, family: str, log_x: bool, folds: int, absolute_sigma: bool) -> FitResult:
    if distinct_count(np.sort(samples.x)) < 3:
        raise ScienceInputError(f"the {family} model needs samples at 3 or more distinct x values")
    z = np.log(samples.x) if log_x else samples.x
    low, high = float(z.min()), float(z.max())
    centre, scale = low + (high - low) / 2.0, (high - low) / 2.0
    u = (z - centre) / scale
    theta, converged = _least_squares(u, samples.y, samples.weights, _starting_values(u, samples))
    internal = _internal_fit(samples, u, theta, absolute_sigma=absolute_sigma, folds=folds)
    model = ExponentialModel(
        float(theta[0]), float(theta[1]), float(theta[2]), centre, scale, log_x, internal.covariance
    )
    mapping = _reparametrisation(theta, centre=centre, scale=scale)
    a, b, c = float(mapping[0, 0] * theta[0]), float(theta[1] / scale), float(theta[2])
    covariance = mapping @ internal.covariance @ mapping.T
    errors = np.sqrt(np.maximum(np.diag(covariance), 0.0))
    return FitResult(
        family=family,
        parameters={"a": a, "b": b, "c": c},
        standard_errors={"a": float(errors[0]), "b": float(errors[1]), "c": float(errors[2])},
        parameter_names=("a", "b", "c"),
        covariance=covariance,
        stats=internal.stats,
        domain=(float(samples.x.min()), float(samples.x.max())),
        warnings=tuple(_growth_warnings(theta, internal.covariance, a=a, converged=converged, family=family)),
        options={"cv_folds": folds, "absolute_sigma": absolute_sigma},
        model=model,
        noise_variance_factor=internal.variance_factor,
        typical_sigma=typical_sigma(samples),
        independent_covariance=mapping @ internal.independent @ mapping.T,
        parameter_map=mapping,
    )


def _starting_values(u: FloatArray, samples: Samples) -> FloatArray:
    """``(A, B, C)`` from the integral-equation linearisation on samples sorted by ``u``."""
    order = np.argsort(u, kind="stable")
    us, ys, ws = u[order], samples.y[order], samples.weights[order]
    integral = integrate.cumulative_trapezoid(ys, us, initial=0.0)
    design = np.column_stack([us - us[0], integral]) * ws[:, None]
    solution = np.linalg.lstsq(design, (ys - ys[0]) * ws, rcond=None)[0]
    rate = float(np.clip(solution[1], -RATE_LIMIT / 2, RATE_LIMIT / 2))
    if not math.isfinite(rate) or abs(rate) < 1e-3:
        rate = 1e-3 if ys[-1] >= ys[0] else -1e-3
    linear = np.column_stack([np.exp(rate * u), np.ones_like(u)]) * samples.weights[:, None]
    amplitude, offset = np.linalg.lstsq(linear, samples.y * samples.weights, rcond=None)[0]
    return np.array([amplitude, rate, offset])


def _least_squares(
    u: FloatArray, y: FloatArray, weights: FloatArray, start: FloatArray, *, budget: int = MAX_EVALUATIONS
) -> tuple[FloatArray, bool]:
    def residuals(theta: FloatArray) -> FloatArray:
        result: FloatArray = weights * (theta[0] * np.exp(theta[1] * u) + theta[2] - y)
        return result

    def jacobian(theta: FloatArray) -> FloatArray:
        growth = np.exp(theta[1] * u)
        result: FloatArray = np.column_stack([growth, theta[0] * u * growth, np.ones_like(u)]) * weights[:, None]
        return result

    bounds = ([-np.inf, -RATE_LIMIT, -np.inf], [np.inf, RATE_LIMIT, np.inf])
    solution = optimize.least_squares(
        residuals,
        start,
        jac=jacobian,
        bounds=bounds,
        method="trf",
        x_scale="jac",
        ftol=TOLERANCE,
        xtol=TOLERANCE,
        gtol=TOLERANCE,
        max_nfev=budget,
    )
    theta: FloatArray = solution.x
    return theta, bool(solution.status > 0)


@dataclass(frozen=True)
class _InternalFit:
    stats: StatsDict
    covariance: FloatArray
    variance_factor: float
    independent: FloatArray


def _internal_fit(
    samples: Samples, u: FloatArray, theta: FloatArray, *, absolute_sigma: bool, folds: int
) -> _InternalFit:
    growth = np.exp(theta[1] * u)
    residual = samples.y - (theta[0] * growth + theta[2])
    weighted_rss = float(np.sum((samples.weights * residual) ** 2))
    jacobian = np.column_stack([growth, theta[0] * u * growth, np.ones_like(u)]) * samples.weights[:, None]
    factor = noise_variance_factor(weighted_rss=weighted_rss, dof=samples.count - 3, absolute_sigma=absolute_sigma)
    stats = summary_statistics(
        count=samples.count,
        parameter_count=3,
        weighted_rss=weighted_rss,
        residuals=residual_spread(samples, residual),
        r_squared=weighted_r_squared(samples.y, samples.weights, weighted_rss=weighted_rss),
        cv_rmse=_cross_validated_rmse(samples, u, theta, folds=folds),
        condition_number=condition_number(jacobian),
        scale=float(np.max(np.abs(samples.y * samples.weights))),
    )
    # Sandwich covariance robust to residuals correlated along the trace, never below the classical one.
    estimate = jacobian_robust_covariance(jacobian, samples.weights * residual, samples.x, variance_factor=factor)
    stats.update(estimate.stats())
    return _InternalFit(stats, estimate.matrix, factor, estimate.independent)


def _cross_validated_rmse(samples: Samples, u: FloatArray, theta: FloatArray, *, folds: int) -> float | None:
    """k-fold CV, each fold refitted from the full-data optimum (a good start, so it is quick)."""
    folds = min(folds, samples.count)
    squared_error = 0.0
    for held_out in fold_indices(samples.x, folds=folds):
        keep = np.ones(samples.count, dtype=bool)
        keep[held_out] = False
        if np.unique(u[keep]).size < 3:
            return None
        fold_theta, _ = _least_squares(u[keep], samples.y[keep], samples.weights[keep], theta, budget=FOLD_EVALUATIONS)
        with np.errstate(over="ignore"):
            predicted = fold_theta[0] * np.exp(fold_theta[1] * u[held_out]) + fold_theta[2]
        squared_error += float(np.sum((samples.weights[held_out] * (samples.y[held_out] - predicted)) ** 2))
    return math.sqrt(squared_error / float(np.sum(samples.weights**2)))


def _reparametrisation(theta: FloatArray, *, centre: float, scale: float) -> FloatArray:
    """Jacobian of ``(a, b, c) = (A exp(-B centre / scale), B / scale, C)`` w.r.t. ``(A, B, C)``."""
    with np.errstate(over="ignore"):
        shift = float(np.exp(-theta[1] * centre / scale))
    return np.array(
        [
            [shift, -theta[0] * centre / scale * shift, 0.0],
            [0.0, 1.0 / scale, 0.0],
            [0.0, 0.0, 1.0],
        ]
    )


def _growth_warnings(theta: FloatArray, covariance: FloatArray, *, a: float, converged: bool, family: str) -> list[str]:
    messages: list[str] = []
    if not converged:
        messages.append("The nonlinear fit stopped before converging; treat the parameters with caution.")
    scale = math.sqrt(covariance[0, 0] * covariance[2, 2])
    if scale > 0.0 and abs(covariance[0, 2]) / scale > DEGENERATE_CORRELATION:
        simpler = "a logarithmic model" if family == "power" else "a straight line"
        messages.append(
            f"The curvature is too weak to tell a from c (correlation {covariance[0, 2] / scale:+.5f}): the "
            f"samples fit the limiting case of this model, and {simpler} describes them as well with fewer "
            "parameters. The standard errors understate how loosely a and c are determined."
        )
    if abs(theta[1]) >= RATE_LIMIT * 0.999:
        messages.append("The growth rate ran into its numerical limit; this model does not suit the samples.")
    if not math.isfinite(a) or a == 0.0:
        messages.append("The coefficient a is outside the floating-point range for the reported x origin.")
    return messages
