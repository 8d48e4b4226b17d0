"""Goodness-of-fit statistics shared by all fitting families.

Definitions (weights ``w_i = 1 / sigma_i``, all ones without sigma; residuals ``r_i = y_i - f(x_i)``):

- residual SD ``s = sqrt(sum r^2 / dof)`` with ``dof = n - p``: the spread of the residuals in ``y``
  units whether or not the fit was weighted (the residual plot's guide lines and the outlier marks
  use it, so it must be in the units of the residuals);
- reduced chi-square ``sum (w r)^2 / dof`` (dimensionless; weighted fits only, None otherwise):
  about 1 when the given uncertainties describe the scatter, and the factor the relative-sigma
  covariance is scaled by;
- ``R^2 = 1 - sum (w r)^2 / sum w^2 (y - ybar_w)^2``, ``ybar_w`` the weighted mean;
- Gaussian log-likelihood information criteria with ``k = p + 1`` (the noise variance counts):
  ``AIC = n ln(RSS / n) + 2k``, ``AICc = AIC + 2k(k + 1) / (n - k - 1)``, ``BIC = n ln(RSS / n) + k ln n``
  (Burnham & Anderson, *Model Selection and Multimodel Inference*, 2nd ed., 2002, sec. 2.4 and 6.4;
  from memory). Constants common to all models of the same samples are dropped, so only differences
  between models fitted to the same samples are meaningful.

A residual sum of squares below rounding level is raised to ``n (eps * max|w y|)^2`` before taking
its logarithm: residuals that small cannot be told apart from zero, and an exact fit would otherwise
score minus infinity.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np
from scipy import linalg as scipy_linalg
from scipy import stats as scipy_stats

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_inputs import FloatArray, Samples

StatsDict = dict[str, float | int | str | None]

STAT_NAMES: Final = (
    "n",
    "dof",
    "residual_sd",
    "reduced_chi_square",
    "r_squared",
    "aicc",
    "bic",
    "cv_rmse",
    "condition_number",
)


@dataclass(frozen=True)
class ResidualSpread:
    """Unweighted residuals of a fit, summarised: enough for a residual SD in ``y`` units.

    Attributes
    ----------
    sum_of_squares : float
        ``sum (y - f(x))^2`` over the samples (``y`` units squared), no weights.
    count : int
        Number of samples in that sum (the original samples, also when duplicates were merged).
    weighted : bool
        Whether the fit was weighted by given uncertainties.
    """

    sum_of_squares: float
    count: int
    weighted: bool

    def standard_deviation(self, parameter_count: float) -> float | None:
        """``sqrt(sum r^2 / (n - p))`` (``y`` units); None without residual degrees of freedom."""
        dof = self.count - parameter_count
        return math.sqrt(self.sum_of_squares / dof) if dof > 0 else None


def residual_spread(samples: Samples, residual: FloatArray) -> ResidualSpread:
    """:class:`ResidualSpread` of ``residual = y - f(x)`` at the samples (``y`` units)."""
    return ResidualSpread(float(residual @ residual), samples.count, weighted=samples.weighted)


def weighted_r_squared(y: FloatArray, weights: FloatArray | None, *, weighted_rss: float) -> float | None:
    """Weighted coefficient of determination; None when ``y`` is constant (no variation to explain).

    ``weights`` None (or all ones) means an unweighted fit.
    """
    if weights is None or (weights[0] == 1.0 and bool(np.all(weights == 1.0))):
        deviation = y - float(np.mean(y))
        total = float(deviation @ deviation)
    else:
        squared_weights = weights * weights
        mean = float(np.sum(squared_weights * y) / np.sum(squared_weights))
        total = float(np.sum(squared_weights * (y - mean) ** 2))
    if total == 0.0:
        return None
    return 1.0 - weighted_rss / total


def information_criteria(
    *, weighted_rss: float, count: int, parameter_count: float, scale: float
) -> tuple[float | None, float | None]:
    """Return ``(AICc, BIC)`` for a least-squares fit; AICc is None when ``n <= k + 1``.

    Parameters
    ----------
    weighted_rss : float
        Weighted residual sum of squares.
    count : int
        Number of samples ``n``.
    parameter_count : float
        Number of fitted parameters ``p`` (effective degrees of freedom for a smoothing spline).
    scale : float
        Largest ``|w y|``; sets the rounding floor of the residual sum of squares.
    """
    floor = count * (np.finfo(np.float64).eps * max(scale, np.finfo(np.float64).tiny)) ** 2
    log_term = count * math.log(max(weighted_rss, floor) / count)
    k = parameter_count + 1.0
    bic = log_term + k * math.log(count)
    if count - k - 1.0 <= 0.0:
        return None, bic
    return log_term + 2.0 * k + 2.0 * k * (k + 1.0) / (count - k - 1.0), bic


def summary_statistics(
    *,
    count: int,
    parameter_count: float,
    weighted_rss: float,
    residuals: ResidualSpread,
    r_squared: float | None,
    cv_rmse: float | None,
    condition_number: float,
    scale: float,
) -> StatsDict:
    """Assemble the stats dictionary every :class:`FitResult` carries (keys :data:`STAT_NAMES`).

    ``weighted_rss`` (dimensionless when weighted) drives the information criteria and the reduced
    chi-square; ``residuals`` (``y`` units) gives the residual SD.
    """
    dof = count - parameter_count
    aicc, bic = information_criteria(
        weighted_rss=weighted_rss, count=count, parameter_count=parameter_count, scale=scale
    )
    dof_value: float | int = int(dof) if float(dof).is_integer() else float(dof)
    return {
        "n": count,
        "dof": dof_value,
        "residual_sd": residuals.standard_deviation(parameter_count),
        "reduced_chi_square": weighted_rss / dof if residuals.weighted and dof > 0 else None,
        "r_squared": r_squared,
        "aicc": aicc,
        "bic": bic,
        "cv_rmse": cv_rmse,
        "condition_number": condition_number,
    }


def noise_variance_factor(*, weighted_rss: float, dof: float, absolute_sigma: bool) -> float:
    """Factor multiplying ``sigma^2`` to give the variance of one sample.

    With ``absolute_sigma`` the given uncertainties are taken at face value (factor 1); otherwise they
    are relative weights and the factor is the reduced chi-square ``RSS / dof`` (the residual
    variance when unweighted).
    """
    if absolute_sigma:
        return 1.0
    return weighted_rss / dof if dof > 0 else 0.0


NO_BAND_MESSAGE: Final = "this fit has no residual degrees of freedom, so it has no confidence or prediction band"


def student_t_quantile(level: float, dof: float) -> float:
    """Two-sided Student t multiplier for a ``level`` band with ``dof`` degrees of freedom."""
    if dof <= 0:
        raise ScienceInputError(NO_BAND_MESSAGE)
    return float(scipy_stats.t.ppf(0.5 + level / 2.0, dof))


def student_t_quantiles(level: float, dof: FloatArray) -> FloatArray:
    """Two-sided Student t multipliers for a ``level`` band, one per entry of ``dof`` (> 0; infinity: normal)."""
    quantiles: FloatArray = np.asarray(scipy_stats.t.ppf(0.5 + level / 2.0, dof), dtype=np.float64)
    return quantiles


def covariance_from_jacobian(jacobian: FloatArray, *, variance_factor: float) -> FloatArray:
    """Parameter covariance ``factor * (J^T J)^-1`` from a weighted Jacobian, via its SVD."""
    inverse = jacobian_pseudo_inverse(jacobian)
    covariance: FloatArray = variance_factor * (inverse @ inverse.T)
    return covariance


def jacobian_pseudo_inverse(jacobian: FloatArray) -> FloatArray:
    """``J^+`` (shape ``(p, n)``) of a weighted Jacobian, via its SVD.

    Singular values below ``eps * max(shape) * s_max`` are dropped (their directions get infinite
    variance in exact arithmetic; reporting a pseudo-inverse keeps the numbers finite and the
    caller warns about the degeneracy).
    """
    left, singular, vt = scipy_linalg.svd(jacobian, full_matrices=False, check_finite=False)
    threshold = np.finfo(np.float64).eps * max(jacobian.shape) * singular[0]
    keep = singular > threshold
    inverse: FloatArray = (vt[keep].T / singular[keep]) @ left[:, keep].T
    return inverse


def condition_number(matrix: FloatArray) -> float:
    """2-norm condition number of a (weighted) design or Jacobian matrix; inf when rank deficient."""
    singular = scipy_linalg.svdvals(matrix, check_finite=False)
    if singular[-1] == 0.0:
        return math.inf
    return float(singular[0] / singular[-1])
