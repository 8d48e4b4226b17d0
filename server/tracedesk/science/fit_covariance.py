"""Coefficient covariance that stays honest when the residuals along a trace are serially correlated.

Samples along a digitized trace are densely spaced and their errors are not independent: neighbouring
vertices share the pen line's position error, so the residuals, read in trace order (increasing ``x``),
are strongly positively autocorrelated. The classical covariance ``s^2 (J^T J)^-1`` assumes
independence and then understates the standard errors several-fold.

The estimator here is the Newey-West heteroskedasticity and autocorrelation consistent (HAC)
sandwich (Newey & West, Econometrica 55:703-708, 1987), with Bartlett weights ``1 - l / (L + 1)``:

    Var(theta) = n / (n - p) * sum_{|l| <= L} (1 - |l| / (L + 1)) sum_t v_t v_{t-l}^T,

where ``v_t = g_t e_t`` is sample ``t``'s influence on the parameters (``g_t`` the row of the
pseudo-inverse ``J^+`` for a least-squares fit, or of the smoother matrix for a spline) times its
weighted residual ``e_t``, and ``n / (n - p)`` the usual small-sample degrees-of-freedom correction
(common practice; statsmodels calls it ``use_correction``). Because strong positive autocorrelation
makes a plain Bartlett estimate converge slowly (and biased low), the scores are first prewhitened with
the residuals' lag-1 autocorrelation ``rho``: ``v*_t = v_t - rho v_{t-1}``, the HAC sum is taken over
``v*`` and recoloured by ``1 / (1 - rho)^2`` (Andrews & Monahan, Econometrica 60:953-966, 1992, with
a scalar AR(1) prewhitening filter; ``|rho|`` bounded by 0.97 as they bound the filter's eigenvalues,
from memory). As Andrews & Monahan do, the lag ``L`` is Andrews' AR(1) plug-in bandwidth
``floor(1.1447 (alpha n)^(1/3))``, ``alpha = 4 rho*^2 / ((1 - rho*)^2 (1 + rho*)^2)``, of the
prewhitened residuals (Andrews, Econometrica 59:817-858, 1991, eq. 6.4 for the Bartlett kernel). The
fixed rule ``floor(4 (n / 100)^(2/9))`` was tried and dropped: after prewhitening it only adds noise
(independent noise then gave standard errors up to 40 % above the classical ones).

Honesty first: the reported covariance is never smaller than the classical one. It is
``C + (H - C)_+`` (``C`` classical, ``H`` HAC, ``_+`` the positive semidefinite part), which is at
least both ``C`` and ``H`` in the matrix (Loewner) order, so every standard error and every band
variance ``g^T V g`` is at least what either estimator gives.

What no residual-based estimator can see is an error shared by all samples (a calibration offset):
it is absorbed into the fitted coefficients. That part must come from the calibration's own
uncertainty.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np

from tracedesk.science.fit_inputs import FloatArray
from tracedesk.science.fit_stats import jacobian_pseudo_inverse

HAC_ESTIMATOR: Final = "hac_newey_west_prewhitened"
# Andrews & Monahan (1992) keep the prewhitening filter away from a unit root.
PREWHITENING_LIMIT: Final = 0.97
# Andrews (1991), Bartlett kernel: bandwidth constant.
ANDREWS_BARTLETT_CONSTANT: Final = 1.1447
# Below this lag, summing the lag products directly beats the window-sum form.
DIRECT_LAG_LIMIT: Final = 4


@dataclass(frozen=True, eq=False)
class CovarianceEstimate:
    """A parameter covariance and how it was obtained.

    Attributes
    ----------
    matrix : ndarray
        Covariance of the (internal) parameters, square of their units.
    estimator : str
        ``"hac_newey_west_prewhitened"`` or ``"classical"`` (too few samples for HAC).
    lag : int or None
        Bartlett truncation lag ``L`` (samples along the trace); None for ``"classical"``.
    autocorrelation : float or None
        Lag-1 autocorrelation of the weighted residuals in trace order (dimensionless).
    inflation : float
        Largest ratio of a standard error to the independent-error one (>= 1), internal parameters.
    independent : ndarray
        The classical covariance, valid only for independent errors (kept for comparison).
    """

    matrix: FloatArray
    estimator: str
    lag: int | None
    autocorrelation: float | None
    inflation: float
    independent: FloatArray

    def stats(self) -> dict[str, float | int | str | None]:
        """The entries this estimate adds to a fit's statistics."""
        return {
            "covariance_estimator": self.estimator,
            "covariance_lag": self.lag,
            "residual_autocorrelation": self.autocorrelation,
        }


def bartlett_long_run(scores: FloatArray, lag: int, *, overwrite: bool = False) -> FloatArray:
    """``sum_{|l| <= L} (1 - |l| / (L + 1)) sum_t v_t v_{t-l}^T`` for rows ``v_t`` of ``scores``.

    Computed exactly from window sums: with ``S_j`` the sum of ``L + 1`` consecutive rows of the
    zero-padded scores, ``sum_j S_j S_j^T = (L + 1) sum_l (1 - |l| / (L + 1)) Gamma_l`` (each pair of
    rows ``l`` apart shares ``L + 1 - l`` windows). One pass instead of ``L`` matrix products; for the
    short lags prewhitened scores usually need, the lag products themselves are cheaper.

    ``overwrite`` lets the window route keep its running sums in ``scores`` (saves a copy of an
    ``(n, k)`` array; pass Fortran order, where the running sum along the trace is contiguous).
    """
    if lag < DIRECT_LAG_LIMIT:
        total = scores.T @ scores
        for distance in range(1, lag + 1):
            product = scores[distance:].T @ scores[:-distance]
            total += (1.0 - distance / (lag + 1.0)) * (product + product.T)
        return total
    cumulative = np.cumsum(scores, axis=0, out=scores if overwrite else None)
    width = lag + 1
    # Windows of the zero-padded rows: those that start before the first row are running sums,
    # those that end after the last row are the total minus a running sum, the rest differences.
    head = cumulative[:width]
    tail = cumulative[-1] - cumulative[-width:-1]
    middle = cumulative[width:] - cumulative[:-width]
    result: FloatArray = (head.T @ head + middle.T @ middle + tail.T @ tail) / width
    return result


def lag1_autocorrelation(series: FloatArray) -> float:
    """``sum e_t e_{t-1} / sum e_t^2`` (0 for a zero series)."""
    total = float(np.dot(series, series))
    return float(np.dot(series[1:], series[:-1])) / total if total > 0.0 else 0.0


def bartlett_lag(series: FloatArray) -> int:
    """Andrews' (1991) AR(1) plug-in truncation lag ``floor(1.1447 (alpha n)^(1/3))``, below ``n``."""
    count = series.size
    rho = min(abs(lag1_autocorrelation(series)), PREWHITENING_LIMIT)
    alpha = 4.0 * rho**2 / ((1.0 - rho) ** 2 * (1.0 + rho) ** 2)
    andrews = math.floor(ANDREWS_BARTLETT_CONSTANT * (alpha * count) ** (1.0 / 3.0))
    return max(0, min(int(andrews), count - 1))


def serial_robust_covariance(
    design: FloatArray,
    residual: FloatArray,
    x: FloatArray,
    *,
    bread: FloatArray,
    classical: FloatArray,
    parameter_count: float,
) -> CovarianceEstimate:
    """Prewhitened Newey-West covariance, never below ``classical`` (see the module docstring).

    The influence of sample ``t`` on the parameters is ``bread @ design[t]``; the sandwich is
    ``bread @ Omega @ bread^T`` with ``Omega`` the HAC sum over rows ``design[t] * residual[t]``.

    Parameters
    ----------
    design : ndarray, shape (n, k)
        Weighted design or Jacobian rows (or the influence rows themselves with ``bread = I``).
    residual : ndarray, shape (n,)
        Weighted residuals ``w_t (y_t - f(x_t))``.
    x : ndarray, shape (n,)
        Sample abscissae: they give the trace order.
    bread : ndarray, shape (p, k)
        ``(J^T J)^-1`` for a least-squares fit.
    classical : ndarray, shape (p, p)
        The independent-error covariance.
    parameter_count : float
        ``p`` in the ``n / (n - p)`` correction (effective parameters for a spline).
    """
    if residual.size - parameter_count >= 2 and bool(np.any(x[1:] < x[:-1])):
        order = np.argsort(x, kind="stable")
        design, residual = design[order], residual[order]
    scores = np.empty(design.shape, order="F")
    np.multiply(design, residual[:, None], out=scores)
    return covariance_from_scores(scores, residual, bread=bread, classical=classical, parameter_count=parameter_count)


def covariance_from_scores(
    scores: FloatArray, residual: FloatArray, *, bread: FloatArray, classical: FloatArray, parameter_count: float
) -> CovarianceEstimate:
    """:func:`serial_robust_covariance` from the score rows ``design[t] * residual[t]``, in trace order.

    ``scores`` (shape ``(n, k)``, best in Fortran order) is used as scratch space and overwritten.
    """
    count = residual.size
    if count - parameter_count < 2:
        return CovarianceEstimate(classical, "classical", None, None, 1.0, classical)
    rho = lag1_autocorrelation(residual)
    filter_rho = float(np.clip(rho, -PREWHITENING_LIMIT, PREWHITENING_LIMIT))
    lag = bartlett_lag(residual[1:] - filter_rho * residual[:-1])
    # v*_t = v_t - rho v_{t-1}, written without temporaries (the arrays are n x k).
    whitened = np.empty((count - 1, scores.shape[1]), order="F")
    np.multiply(scores[:-1], -filter_rho, out=whitened)
    whitened += scores[1:]
    correction = count / (count - parameter_count)
    meat = bartlett_long_run(whitened, lag, overwrite=True) * (correction / (1.0 - filter_rho) ** 2)
    hac: FloatArray = bread @ meat @ bread.T
    matrix = loewner_upper_bound(classical, hac)
    return CovarianceEstimate(matrix, HAC_ESTIMATOR, lag, rho, standard_error_inflation(classical, matrix), classical)


def jacobian_robust_covariance(
    jacobian: FloatArray, residual: FloatArray, x: FloatArray, *, variance_factor: float
) -> CovarianceEstimate:
    """:func:`serial_robust_covariance` of a least-squares fit from its weighted Jacobian at the optimum.

    The influence rows are those of ``(J^+)^T`` (the linearised sandwich for a nonlinear model);
    the classical covariance is ``variance_factor * J^+ J^+T``.
    """
    inverse = jacobian_pseudo_inverse(jacobian)
    bread: FloatArray = inverse @ inverse.T
    return serial_robust_covariance(
        jacobian, residual, x, bread=bread, classical=variance_factor * bread, parameter_count=jacobian.shape[1]
    )


def loewner_upper_bound(first: FloatArray, second: FloatArray) -> FloatArray:
    """``A + (B - A)_+``: at least ``A`` and at least ``B`` in the positive semidefinite order.

    The eigen-decomposition runs on the difference scaled to unit diagonal, so parameters in very
    different units (an amplitude and a rate) do not swamp each other; congruence keeps the order.
    """
    scale = np.sqrt(np.maximum(np.diag(first), np.diag(second)))
    scale[~(scale > 0.0)] = 1.0
    difference = (second - first) / np.outer(scale, scale)
    values, vectors = np.linalg.eigh((difference + difference.T) / 2.0)
    positive = (vectors * np.maximum(values, 0.0)) @ vectors.T
    bound: FloatArray = first + positive * np.outer(scale, scale)
    return bound


def standard_error_inflation(classical: FloatArray, reported: FloatArray) -> float:
    """Largest ``sqrt(reported_kk / classical_kk)`` over parameters with a nonzero classical variance."""
    base = np.diag(classical)
    usable = base > 0.0
    if not bool(usable.any()):
        return 1.0
    return float(np.sqrt(np.max(np.diag(reported)[usable] / base[usable])))
