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

Long traces are summed in blocks first. The estimator is then the same formula applied to the series of
block sums ``u_m = sum of b consecutive v_t`` with ``ceil((L + 1) / b)`` blocks per window (temporal
aggregation: the block sums add up to the same total, so they estimate the same long-run variance,
and the result is still a sum of outer products, hence positive semidefinite). For ``b = 1`` it is the
textbook estimator exactly. The prewhitened block sums need no pass over the whitened series:
``sum_{t in block} (v_t - rho v_{t-1}) = (1 - rho) u_m + rho (v_end(m) - v_end(m-1))``. The
cost is one pass over the influence rows instead of five, which is what keeps 100,000-sample fits
as fast as a plain least-squares solve; the price is a little more variance in the estimate when
``L + 1 < b`` (nearly white residuals), negligible with the thousands of blocks long traces give.

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
from tracedesk.science.narrow_products import cross_product, gram_matrix

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

    block: int | None = None

    def stats(self) -> dict[str, float | int | str | None]:
        """The entries this estimate adds to a fit's statistics."""
        return {
            "covariance_estimator": self.estimator,
            "covariance_lag": self.lag,
            "covariance_block": self.block,
            "residual_autocorrelation": self.autocorrelation,
        }


@dataclass(frozen=True, eq=False)
class BlockScores:
    """Score rows ``v_t`` (in trace order) summed over consecutive blocks of ``size`` samples.

    Attributes
    ----------
    sums : ndarray, shape (m, k)
        ``sum v_t`` over each block; the last block may hold fewer than ``size`` samples.
    ends : ndarray, shape (m, k)
        ``v_t`` of each block's last sample.
    first : ndarray, shape (k,)
        ``v_0``, the first sample's row (the AR(1) filter has no predecessor for it).
    size : int
        Samples per block (``1``: the rows themselves).
    """

    sums: FloatArray
    ends: FloatArray
    first: FloatArray
    size: int

    @classmethod
    def of_rows(cls, scores: FloatArray) -> BlockScores:
        """Blocks of one sample: the rows themselves (the textbook estimator)."""
        return cls(scores, scores, scores[0], 1)

    def prewhitened(self, rho: float) -> FloatArray:
        """Block sums of ``v*_t = v_t - rho v_{t-1}`` for ``t >= 1`` (Fortran order).

        For blocks of more than one sample the result is written over ``sums`` and ``ends`` (no
        temporaries: fresh arrays of this size cost page faults); the blocks are spent afterwards.
        """
        if self.size == 1:  # sums and ends are the same rows: v*_t straight from them
            whitened = np.empty(self.sums.shape, order="F")
            whitened[0] = 0.0
            np.multiply(self.sums[:-1], -rho, out=whitened[1:])
            whitened[1:] += self.sums[1:]
            return whitened
        whitened, ends = self.sums, self.ends
        whitened *= 1.0 - rho
        ends *= rho
        whitened[0] += ends[0]
        whitened[0] -= self.first
        whitened[1:] += ends[1:]
        whitened[1:] -= ends[:-1]
        return whitened


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
        total = gram_matrix(scores)
        for distance in range(1, lag + 1):
            product = cross_product(scores[distance:], scores[:-distance])
            total += (1.0 - distance / (lag + 1.0)) * (product + product.T)
        return total
    cumulative = np.cumsum(scores, axis=0, out=scores if overwrite else None)
    width = lag + 1
    # Windows of the zero-padded rows: those that start before the first row are running sums,
    # those that end after the last row are the total minus a running sum, the rest differences.
    head = cumulative[:width]
    tail = cumulative[-1] - cumulative[-width:-1]
    middle = cumulative[width:] - cumulative[:-width]
    result: FloatArray = (gram_matrix(head) + gram_matrix(middle) + gram_matrix(tail)) / width
    return result


def lag1_autocorrelation(series: FloatArray) -> float:
    """``sum e_t e_{t-1} / sum e_t^2`` (0 for a zero series)."""
    total = float(np.dot(series, series))
    return float(np.dot(series[1:], series[:-1])) / total if total > 0.0 else 0.0


def andrews_lag(rho: float, count: int) -> int:
    """Andrews' (1991) AR(1) plug-in truncation lag ``floor(1.1447 (alpha n)^(1/3))``, below ``n``.

    ``rho`` is the lag-1 autocorrelation of a series of ``count`` values.
    """
    rho = min(abs(rho), PREWHITENING_LIMIT)
    alpha = 4.0 * rho**2 / ((1.0 - rho) ** 2 * (1.0 + rho) ** 2)
    andrews = math.floor(ANDREWS_BARTLETT_CONSTANT * (alpha * count) ** (1.0 / 3.0))
    return max(0, min(int(andrews), count - 1))


def prewhitened_lag(residual: FloatArray, rho: float) -> int:
    """:func:`andrews_lag` of ``e_t - rho e_{t-1}`` (``t >= 1``) without forming that series.

    Its lag-0 and lag-1 sums follow exactly from the residuals' own ``S_j = sum_t e_t e_{t-j}``,
    ``j = 0, 1, 2``, with the end terms the shorter sums leave out.
    """
    e = residual
    count = e.size
    if count < 4:
        return andrews_lag(lag1_autocorrelation(e[1:] - rho * e[:-1]), count - 1)
    s0, s1, s2 = float(e @ e), float(e[1:] @ e[:-1]), float(e[2:] @ e[:-2])
    first, second, last, before_last = float(e[0]), float(e[1]), float(e[-1]), float(e[-2])
    energy = (s0 - first**2) - 2.0 * rho * s1 + rho**2 * (s0 - last**2)
    cross = (s1 - second * first) - rho * (s0 - first**2 - last**2) - rho * s2 + rho**2 * (s1 - last * before_last)
    return andrews_lag(cross / energy if energy > 0.0 else 0.0, count - 1)


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
    ``bread @ Omega @ bread^T`` with ``Omega`` the HAC sum over rows ``design[t] * residual[t]``
    (blocks of one sample: the textbook estimator).

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
    return covariance_from_blocks(
        BlockScores.of_rows(scores), residual, bread=bread, classical=classical, parameter_count=parameter_count
    )


def covariance_from_blocks(
    blocks: BlockScores, residual: FloatArray, *, bread: FloatArray, classical: FloatArray, parameter_count: float
) -> CovarianceEstimate:
    """:func:`serial_robust_covariance` from block sums of the score rows ``design[t] * residual[t]``.

    ``residual`` (shape ``(n,)``, in trace order) gives the prewhitening coefficient and Andrews'
    lag ``L`` in samples; the Bartlett window then spans ``ceil((L + 1) / b)`` blocks of ``b`` samples.
    """
    count = residual.size
    if count - parameter_count < 2:
        return CovarianceEstimate(classical, "classical", None, None, 1.0, classical)
    rho = lag1_autocorrelation(residual)
    filter_rho = float(np.clip(rho, -PREWHITENING_LIMIT, PREWHITENING_LIMIT))
    lag = prewhitened_lag(residual, filter_rho)
    block_lag = -(-(lag + 1) // blocks.size) - 1
    correction = count / (count - parameter_count)
    long_run = bartlett_long_run(blocks.prewhitened(filter_rho), block_lag, overwrite=True)
    meat = long_run * (correction / (1.0 - filter_rho) ** 2)
    hac: FloatArray = bread @ meat @ bread.T
    matrix = loewner_upper_bound(classical, hac)
    inflation = standard_error_inflation(classical, matrix)
    return CovarianceEstimate(matrix, HAC_ESTIMATOR, lag, rho, inflation, classical, blocks.size)


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
