"""Weighted linear least squares with cross-validation and extended-precision refinement.

Every model that is linear in its parameters (polynomial in a Chebyshev basis, Fourier series with a
known period, logarithmic) is solved here, on the augmented weighted matrix ``[W A | W y]`` of each
cross-validation fold, so k-fold cross-validation costs little more than one fit.

In the well-conditioned bases the families use, the triangular factor ``R`` is the Cholesky factor
of the augmented Gram matrix ``[W A | W y]^T [W A | W y]``: a single BLAS pass per fold, which is
what makes 100,000-sample fits fast; leave-one-fold-out systems are just ``G - G_fold``. Forming the
Gram matrix squares the condition number kappa, harmless for the few-unit kappa of a Chebyshev or
Fourier basis on its scaled domain (Bjorck, *Numerical Methods for Least Squares Problems*, 1996,
ch. 2; from memory). When the design is more ill-conditioned than GRAM_CONDITION_LIMIT, Householder
QR of each fold and of the stacked fold factors takes over (Golub & Van Loan, *Matrix Computations*,
4th ed., sec. 5.3; the stacked-R reduction is "TSQR", Demmel et al., SIAM J. Sci. Comput. 34(1), 2012).

When rounding could matter against the statistical uncertainty (exact or nearly exact data, or
small problems where it is cheap anyway), the solution gets two steps of iterative refinement
with residuals and ``A^T r`` accumulated in x87 extended precision (``numpy.longdouble``), the
classic mixed-precision least-squares refinement (Bjorck 1996, ch. 2; from memory). This lets the
NIST Wampler 4 and 5 polynomials come out to more digits than a plain double-precision solve.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Final

import numpy as np
from numpy.typing import NDArray
from scipy import linalg as scipy_linalg
from scipy.linalg import lapack

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_covariance import BlockScores, CovarianceEstimate, covariance_from_blocks
from tracedesk.science.fit_inputs import FloatArray, FoldIndex, Samples, fold_indices
from tracedesk.science.fit_stats import (
    ResidualSpread,
    StatsDict,
    noise_variance_factor,
    summary_statistics,
    weighted_r_squared,
)
from tracedesk.science.narrow_products import gram_matrix

LongArray = NDArray[np.longdouble]
BasisBuilder = Callable[[FloatArray, FloatArray], None]
ExtendedBasisBuilder = Callable[[LongArray], LongArray]

# Problems this small are always refined: the extended-precision pass costs well under a millisecond.
ALWAYS_REFINE_SIZE: Final = 100_000
REFINEMENT_STEPS: Final = 2
# Above this condition number of the weighted design, the Gram (Cholesky) route gives way to QR.
GRAM_CONDITION_LIMIT: Final = 1e4
# A residual sum of squares below this fraction of |W y|^2 is recomputed from explicit residuals.
CANCELLATION_FRACTION: Final = 1e-8
# Below this many samples the HAC covariance takes every score row in trace order (the textbook
# estimator; a few milliseconds at most); above it, rows summed per block of one sample from each fold.
EXACT_HAC_SAMPLES: Final = 20_000


@dataclass(frozen=True)
class LinearSolution:
    """Solution of a weighted linear least-squares problem.

    Attributes
    ----------
    coefficients : ndarray
        Best-fit coefficients, rounded to float64.
    extended_coefficients : ndarray of longdouble
        The same to extended precision (equal to ``coefficients`` when no refinement ran).
    r_factor : ndarray
        Upper-triangular ``R`` of the weighted design matrix (``A^T W^2 A = R^T R``).
    weighted_rss : float
        ``sum (w (y - A c))^2``.
    value_rss : float
        ``sum (y - A c)^2`` without weights (``y`` units squared; equal to ``weighted_rss`` unweighted).
    cv_rmse : float or None
        Weighted k-fold cross-validated RMS prediction error (``y`` units); None when a fold's
        training part cannot determine the coefficients.
    condition_number : float
        2-norm condition number of the weighted design matrix.
    refined : bool
        Whether extended-precision refinement ran.
    basis : callable
        The design-matrix builder the problem was solved with.
    fold_rows : tuple of ndarray
        The augmented weighted matrix ``[W A | W y]`` of each cross-validation fold: fold ``j`` of
        ``k`` holds the samples of rank ``j, j + k, j + 2k, ...`` in increasing ``x`` (trace order),
        so the covariance can reuse them instead of building the design matrix again.
    """

    coefficients: FloatArray
    extended_coefficients: LongArray
    r_factor: FloatArray
    weighted_rss: float
    value_rss: float
    cv_rmse: float | None
    condition_number: float
    refined: bool
    basis: BasisBuilder
    fold_rows: tuple[FloatArray, ...] = ()


@dataclass(frozen=True)
class _Fold:
    """One cross-validation fold: the augmented weighted matrix ``[W A | W y]`` (Fortran order)."""

    augmented: FloatArray
    weights: FloatArray
    unweighted: bool = False

    @property
    def design(self) -> FloatArray:
        """Weighted design rows ``W A``."""
        return self.augmented[:, :-1]

    @property
    def target(self) -> FloatArray:
        """Weighted targets ``W y``."""
        return self.augmented[:, -1]


@dataclass(frozen=True)
class _Solved:
    r_factor: FloatArray
    coefficients: FloatArray
    weighted_rss: float
    cv_rmse: float | None
    condition: float
    amplification: float = 1.0  # extra rounding amplification of the route taken (kappa for Gram)


def solve_linear_least_squares(
    samples: Samples,
    basis: BasisBuilder,
    *,
    columns: int,
    extended_basis: ExtendedBasisBuilder | None,
    folds: int,
    rank_message: str,
) -> LinearSolution:
    """Solve ``min || W (A c - y) ||`` with ``A = basis(x)`` and ``W = diag(1 / sigma)``.

    Parameters
    ----------
    samples : Samples
        Validated samples.
    basis : callable
        ``basis(x, out)`` writes the float64 design matrix (one column per coefficient) into the
        Fortran-ordered array ``out``.
    columns : int
        Number of coefficients.
    extended_basis : callable or None
        ``x -> A`` evaluated in ``numpy.longdouble``; enables refinement.
    folds : int
        Number of cross-validation folds (capped at the number of samples).
    rank_message : str
        Message of the :class:`ScienceInputError` raised when the samples cannot determine all
        coefficients.
    """
    fold_data = [
        _fold(samples, index, basis, columns) for index in fold_indices(samples.x, folds=min(folds, samples.count))
    ]
    solved = _solve_by_gram(fold_data) or _solve_by_qr(fold_data, rank_message)
    coefficients, weighted_rss = solved.coefficients, solved.weighted_rss
    extended = coefficients.astype(np.longdouble)
    condition = solved.condition
    refined = extended_basis is not None and _refinement_worthwhile(
        samples.count, solved, math.sqrt(weighted_rss), condition
    )
    if refined and extended_basis is not None:
        extended, weighted_rss = _refine(samples, extended_basis, solved.r_factor, extended)
        coefficients = extended.astype(np.float64)
    return LinearSolution(
        coefficients=coefficients,
        extended_coefficients=extended,
        r_factor=solved.r_factor,
        weighted_rss=weighted_rss,
        value_rss=_value_rss(fold_data, coefficients) if samples.weighted else weighted_rss,
        cv_rmse=solved.cv_rmse,
        condition_number=condition,
        refined=refined,
        basis=basis,
        fold_rows=tuple(fold.augmented for fold in fold_data),
    )


def _value_rss(folds: list[_Fold], coefficients: FloatArray) -> float:
    """``sum (y - A c)^2`` without weights: each weighted residual divided by its weight ``1 / sigma``."""
    return sum(float(np.sum(((fold.target - fold.design @ coefficients) / fold.weights) ** 2)) for fold in folds)


def _fold(samples: Samples, index: FoldIndex, basis: BasisBuilder, columns: int) -> _Fold:
    weights = samples.weights[index]
    augmented = np.empty((weights.size, columns + 1), order="F")
    basis(samples.x[index], augmented[:, :columns])
    augmented[:, columns] = samples.y[index]
    if samples.weighted:
        augmented *= weights[:, None]
    return _Fold(augmented, weights, unweighted=not samples.weighted)


def _solve_by_gram(folds: list[_Fold]) -> _Solved | None:
    """Cholesky factor of the augmented Gram matrix; None when the basis is too ill-conditioned.

    ``[W A | W y]^T [W A | W y] = R_aug^T R_aug`` gives ``R``, ``Q^T y`` and the residual norm just
    as QR of the augmented matrix would, from one BLAS pass per fold. Squaring the design costs a
    factor kappa in rounding error, negligible while kappa stays below GRAM_CONDITION_LIMIT (the
    Chebyshev and Fourier bases on their scaled domains have kappa of a few units); beyond it the
    caller falls back to Householder QR. Leave-one-fold-out systems are just ``G - G_fold``, and the
    held-out errors follow from ``G_fold`` too, so cross-validation needs no further pass over the
    samples (and no extra multithreaded BLAS calls, which stall on a busy machine).
    """
    grams = [gram_matrix(fold.augmented) for fold in folds]
    total = np.sum(grams, axis=0)
    columns = total.shape[0] - 1
    r_factor = _cholesky(total[:columns, :columns])
    condition = math.inf if r_factor is None else _triangular_condition(r_factor)
    if r_factor is None or condition > GRAM_CONDITION_LIMIT:
        return None
    projected = _triangular_solve(r_factor, total[:columns, columns], transpose=True)
    coefficients = _triangular_solve(r_factor, projected, transpose=False)
    weighted_rss = max(0.0, float(total[columns, columns] - projected @ projected))
    if weighted_rss <= CANCELLATION_FRACTION * total[columns, columns]:
        # Nearly exact fit: the difference above is mostly rounding, so measure the residual.
        weighted_rss = sum(float(np.sum((fold.target - fold.design @ coefficients) ** 2)) for fold in folds)
    cv_rmse = _gram_cross_validation(folds, grams, total)
    return _Solved(r_factor, coefficients, weighted_rss, cv_rmse, condition, amplification=condition)


def _cholesky(matrix: FloatArray) -> FloatArray | None:
    factor, info = lapack.dpotrf(matrix, lower=0, clean=1)
    return None if info != 0 else np.asarray(factor, dtype=np.float64)


def _triangular_solve(r_factor: FloatArray, right: FloatArray, *, transpose: bool) -> FloatArray:
    """``R^-1 b`` or ``R^-T b`` for upper-triangular ``R`` (LAPACK dtrtrs: no threading overhead)."""
    solution, _ = lapack.dtrtrs(r_factor, right, lower=0, trans=1 if transpose else 0)
    return np.asarray(solution, dtype=np.float64)


def _gram_cross_validation(folds: list[_Fold], grams: list[FloatArray], total: FloatArray) -> float | None:
    """k-fold CV from Gram matrices: error of fold j is ``|t_j - D_j c|^2`` expanded through ``G_j``."""
    if len(folds) < 2:
        return None
    columns = total.shape[0] - 1
    squared_error = 0.0
    for gram in grams:
        training = total - gram
        r_factor = _cholesky(training[:columns, :columns])
        if r_factor is None or _triangular_condition(r_factor) > GRAM_CONDITION_LIMIT:
            return None
        half = _triangular_solve(r_factor, training[:columns, columns], transpose=True)
        fold_coefficients = _triangular_solve(r_factor, half, transpose=False)
        cross = float(fold_coefficients @ gram[:columns, columns])
        quadratic = float(fold_coefficients @ gram[:columns, :columns] @ fold_coefficients)
        squared_error += max(0.0, float(gram[columns, columns]) - 2.0 * cross + quadratic)
    return math.sqrt(squared_error / _weight_total(folds))


def _weight_total(folds: list[_Fold]) -> float:
    """``sum w^2`` over all samples (their count when unweighted)."""
    return sum(float(fold.weights.size) if fold.unweighted else float(fold.weights @ fold.weights) for fold in folds)


def _solve_by_qr(folds: list[_Fold], rank_message: str) -> _Solved:
    """Householder QR of each fold's augmented matrix, then of the stacked triangular factors."""
    factors = [_qr_factor(fold.augmented) for fold in folds]
    r_factor, projected, rho = _combine_factors(factors)
    _check_rank(r_factor, rank_message)
    coefficients = _triangular_solve(r_factor, projected, transpose=False)
    condition = _triangular_condition(r_factor)
    return _Solved(r_factor, coefficients, rho * rho, _qr_cross_validation(folds, factors), condition)


def _qr_factor(augmented: FloatArray) -> FloatArray:
    # LAPACK directly: scipy.linalg.qr(mode="r") would also triangularise the full tall matrix.
    packed, _, _, info = lapack.dgeqrf(augmented, overwrite_a=0)
    if info != 0:
        raise ScienceInputError("the least-squares factorisation failed (LAPACK dgeqrf)")
    return np.triu(packed[: min(augmented.shape)])


def _combine_factors(factors: list[FloatArray]) -> tuple[FloatArray, FloatArray, float]:
    """QR of stacked triangular factors -> (R, Q^T y, residual norm)."""
    stacked = np.vstack(factors)
    width = stacked.shape[1]
    combined = scipy_linalg.qr(stacked, mode="r", check_finite=False)[0]
    full = np.zeros((width, width))
    rows = min(width, combined.shape[0])
    full[:rows] = np.triu(combined[:rows])
    return full[:-1, :-1], full[:-1, -1], abs(float(full[-1, -1]))


def _check_rank(r_factor: FloatArray, message: str) -> None:
    diagonal = np.abs(np.diag(r_factor))
    if diagonal.size and diagonal.min() <= 64 * np.finfo(np.float64).eps * diagonal.max() * diagonal.size:
        raise ScienceInputError(message)


def _triangular_condition(r_factor: FloatArray) -> float:
    """2-norm condition number (LAPACK dgesdd directly: scipy's svdvals wrapper costs more than the SVD)."""
    _, singular, _, info = lapack.dgesdd(r_factor, compute_uv=0)
    if info != 0:
        raise ScienceInputError("the singular value decomposition failed (LAPACK dgesdd)")
    return float(singular[0] / singular[-1]) if singular[-1] > 0 else math.inf


def _refinement_worthwhile(count: int, solved: _Solved, rho: float, condition: float) -> bool:
    """True when double-precision rounding may be visible next to the standard errors."""
    columns = solved.r_factor.shape[0]
    if count * columns <= ALWAYS_REFINE_SIZE or rho == 0.0:
        return True
    # Perturbation bound for least squares: eps * kappa * (|A| |c| + kappa |r|) (Golub & Van Loan,
    # ch. 5; from memory), times kappa again on the Gram route; refine when it exceeds a thousandth
    # of the noise level per degree of freedom.
    norm = float(np.linalg.norm(solved.r_factor, 2))
    size = norm * float(np.linalg.norm(solved.coefficients)) + condition * rho
    rounding = np.finfo(np.float64).eps * solved.amplification * condition * size
    noise = rho / math.sqrt(max(count - columns, 1))
    return bool(rounding * 1e3 > noise)


def _refine(
    samples: Samples, extended_basis: ExtendedBasisBuilder, r_factor: FloatArray, coefficients: LongArray
) -> tuple[LongArray, float]:
    weights = samples.weights.astype(np.longdouble)
    design = extended_basis(samples.x.astype(np.longdouble)) * weights[:, None]
    target = samples.y.astype(np.longdouble) * weights
    for _ in range(REFINEMENT_STEPS):
        residual = target - design @ coefficients
        gradient = (design.T @ residual).astype(np.float64)
        half = _triangular_solve(r_factor, gradient, transpose=True)
        step = _triangular_solve(r_factor, half, transpose=False)
        coefficients = coefficients + step.astype(np.longdouble)
    residual = target - design @ coefficients
    return coefficients, float(np.sum(residual * residual))


def _qr_cross_validation(folds: list[_Fold], factors: list[FloatArray]) -> float | None:
    if len(folds) < 2:
        return None
    squared_error = 0.0
    for held_out, fold in enumerate(folds):
        r_factor, projected, _ = _combine_factors([f for index, f in enumerate(factors) if index != held_out])
        diagonal = np.abs(np.diag(r_factor))
        if diagonal.min() <= 1e-12 * diagonal.max():
            return None
        error = fold.target - fold.design @ _triangular_solve(r_factor, projected, transpose=False)
        squared_error += float(error @ error)
    return math.sqrt(squared_error / _weight_total(folds))


@dataclass(frozen=True)
class LinearSummary:
    """Statistics and coefficient covariance of a :class:`LinearSolution`."""

    stats: StatsDict
    covariance: FloatArray
    variance_factor: float
    typical_sigma: float
    estimate: CovarianceEstimate


def summarise_linear_solution(
    samples: Samples, solution: LinearSolution, *, absolute_sigma: bool, extra_parameters: int = 0
) -> LinearSummary:
    """Stats dictionary and serial-correlation-robust covariance of the coefficients.

    The covariance is the prewhitened Newey-West sandwich along the trace, never below the
    independent-error ``factor * (R^T R)^-1`` (:func:`~tracedesk.science.fit_covariance.serial_robust_covariance`).
    ``factor`` is 1 with ``absolute_sigma`` (sigma taken at face value), otherwise the reduced
    chi-square (the residual variance for unweighted fits), as in :func:`noise_variance_factor`.
    ``extra_parameters`` counts nonlinear parameters fitted besides the linear coefficients (an
    estimated period): they use up degrees of freedom and enter the information criteria.
    """
    columns = solution.coefficients.size
    dof = samples.count - columns - extra_parameters
    factor = noise_variance_factor(weighted_rss=solution.weighted_rss, dof=dof, absolute_sigma=absolute_sigma)
    # dtrtri rather than a triangular solve with an identity right-hand side: the latter goes through
    # multithreaded BLAS and costs milliseconds even for a 3 x 3 matrix.
    inverse_r, info = lapack.dtrtri(solution.r_factor, lower=0)
    if info != 0:
        raise ScienceInputError("the samples cannot determine the coefficients (singular factor)")
    stats = summary_statistics(
        count=samples.count,
        parameter_count=columns + extra_parameters,
        weighted_rss=solution.weighted_rss,
        residuals=ResidualSpread(solution.value_rss, samples.count, weighted=samples.weighted),
        r_squared=weighted_r_squared(
            samples.y, samples.weights if samples.weighted else None, weighted_rss=solution.weighted_rss
        ),
        cv_rmse=solution.cv_rmse,
        condition_number=solution.condition_number,
        scale=_largest_weighted_value(samples),
    )
    unscaled = inverse_r @ inverse_r.T
    estimate = _robust_covariance(
        samples, solution, unscaled, factor=factor, parameter_count=columns + extra_parameters
    )
    stats.update(estimate.stats())
    return LinearSummary(stats, estimate.matrix, factor, typical_sigma(samples), estimate)


def _robust_covariance(
    samples: Samples, solution: LinearSolution, unscaled: FloatArray, *, factor: float, parameter_count: int
) -> CovarianceEstimate:
    """HAC covariance from the weighted design ``W A`` and bread ``(A^T W^2 A)^-1``.

    The score rows ``W A_t (w_t r_t)`` come straight from the solver's cross-validation folds, which
    interleave the samples by rank, without building ``W A`` again. Row ``m`` of the ``K`` folds holds
    samples ``mK .. mK + K - 1`` in trace order, so long traces are summed in blocks of ``K``
    (:class:`~tracedesk.science.fit_covariance.BlockScores`) at no extra cost; short ones keep every
    row (scattered into trace order) for the textbook estimator.
    """
    folds = solution.fold_rows
    columns = unscaled.shape[0]
    residual = np.empty(samples.count)
    fitted = np.empty(folds[0].shape[0])
    residuals: list[FloatArray] = []
    for start, augmented in enumerate(folds):
        rows = augmented.shape[0]
        np.matmul(augmented[:, :columns], solution.coefficients, out=fitted[:rows])
        residuals.append(np.subtract(augmented[:, columns], fitted[:rows], out=residual[start :: len(folds)]))
    if samples.count < EXACT_HAC_SAMPLES:
        blocks = _trace_ordered_scores(folds, residuals, columns)
    else:
        blocks = _fold_block_scores(folds, residuals, columns)
    return covariance_from_blocks(
        blocks, residual, bread=unscaled, classical=factor * unscaled, parameter_count=parameter_count
    )


def _trace_ordered_scores(folds: tuple[FloatArray, ...], residuals: list[FloatArray], columns: int) -> BlockScores:
    """Every score row, scattered from the interleaved folds into trace order."""
    count = sum(fold_residual.size for fold_residual in residuals)
    scores = np.empty((count, columns), order="F")
    for start, (augmented, fold_residual) in enumerate(zip(folds, residuals, strict=True)):
        np.multiply(augmented[:, :columns], fold_residual[:, None], out=scores[start :: len(folds)])
    return BlockScores.of_rows(scores)


def _fold_block_scores(folds: tuple[FloatArray, ...], residuals: list[FloatArray], columns: int) -> BlockScores:
    """Score rows summed over blocks of ``K`` consecutive samples: row ``m`` of every fold.

    Fold ``f`` holds ranks ``f, f + K, ...``, so fold 0 has the most rows (one per block, the last
    block short when ``K`` does not divide ``n``), fold ``K - 1`` ends every full block, and the
    short block ends in fold ``n mod K - 1``, the last fold that reaches it. The folds are taken in
    order through one scratch array, which is left holding exactly those block ends.
    """
    size = len(folds)
    block_count = residuals[0].size
    full_blocks = sum(fold_residual.size for fold_residual in residuals) // size
    sums = np.empty((block_count, columns), order="F")
    np.multiply(folds[0][:, :columns], residuals[0][:, None], out=sums)
    first = sums[0].copy()
    if size == 1:
        return BlockScores(sums, sums, first, 1)
    ends = np.empty((block_count, columns), order="F")
    for augmented, fold_residual in zip(folds[1:], residuals[1:], strict=True):
        rows = fold_residual.size
        np.multiply(augmented[:, :columns], fold_residual[:, None], out=ends[:rows])
        sums[:rows] += ends[:rows]
    if block_count > full_blocks and residuals[1].size == full_blocks:
        ends[full_blocks] = sums[full_blocks]  # the short block holds fold 0's sample alone
    return BlockScores(sums, ends, first, size)


def _largest_weighted_value(samples: Samples) -> float:
    """``max |w y|``, the scale of the weighted targets."""
    if not samples.weighted:
        return max(abs(float(samples.y.max())), abs(float(samples.y.min())))
    weighted = np.multiply(samples.y, samples.weights)
    return float(np.max(np.abs(weighted, out=weighted)))


def typical_sigma(samples: Samples) -> float:
    """Root-mean-square sigma of the samples (1 for unweighted fits): the default new-sample uncertainty."""
    if not samples.weighted:
        return 1.0
    return float(np.sqrt(np.mean(1.0 / samples.weights**2)))
