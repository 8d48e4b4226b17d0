"""Polynomial least squares, solved in a Chebyshev basis and reported in powers of ``x``.

The samples' range ``[xmin, xmax]`` is mapped onto ``t`` in ``[-1, 1]`` and the coefficients of
``T_0(t) .. T_n(t)`` are found by QR (:mod:`tracedesk.science.fit_linear`); on that scaled domain
the Chebyshev design matrix is well conditioned for any sensible sample spacing, whereas the raw
power basis ``1, x, x^2, ...`` loses digits quickly (the classic Vandermonde trouble; Trefethen,
*Approximation Theory and Approximation Practice*, 2013, ch. 3; from memory). The result is then
converted exactly to ``c0 + c1 x + ... + cn x^n`` with its covariance carried along, and a warning
says how many digits the power form loses over the traced range.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Final, TypeVar

import numpy as np
from numpy.polynomial import chebyshev
from numpy.typing import ArrayLike, NDArray

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_inputs import (
    DEFAULT_CV_FOLDS,
    FloatArray,
    check_degree,
    check_fold_count,
    check_samples,
    distinct_count,
)
from tracedesk.science.fit_linear import (
    LinearSolution,
    LinearSummary,
    LongArray,
    solve_linear_least_squares,
    summarise_linear_solution,
)
from tracedesk.science.fit_power_basis import (
    DIGITS_LOST_WARNING,
    chebyshev_to_power,
    chebyshev_to_power_matrix,
    power_basis_digits_lost,
)
from tracedesk.science.fit_result import FitResult

FloatT = TypeVar("FloatT", bound=np.floating[Any])

MAX_POLYNOMIAL_DEGREE: Final = 15
# Above this the samples barely pin the coefficients down even in the Chebyshev basis.
CONDITION_WARNING: Final = 1e8


@dataclass(frozen=True)
class ChebyshevModel:
    """A Chebyshev series ``sum a_k T_k((x - centre) / half_width)`` and its coefficient covariance."""

    coefficients: FloatArray
    centre: float
    half_width: float
    internal_covariance: FloatArray | None

    def scaled(self, x: FloatArray) -> FloatArray:
        """``t = (x - centre) / half_width``."""
        return (x - self.centre) / self.half_width

    def evaluate(self, x: FloatArray) -> FloatArray:
        """Series value at ``x`` by Clenshaw's recurrence (``y`` units)."""
        return np.asarray(chebyshev.chebval(self.scaled(x), self.coefficients), dtype=np.float64)

    def parameter_gradient(self, x: FloatArray) -> FloatArray:
        """``d f / d a_k = T_k(t)``."""
        return chebyshev_design(self.scaled(x), degree=self.coefficients.size - 1)


def chebyshev_design(t: NDArray[FloatT], *, degree: int, out: NDArray[FloatT] | None = None) -> NDArray[FloatT]:
    """Columns ``T_0(t) .. T_degree(t)``, in Fortran order (the layout LAPACK's QR works on).

    ``out``, when given, is a ``(len(t), degree + 1)`` array to fill (e.g. a column block of a larger
    Fortran-ordered matrix).
    """
    design = np.empty((t.size, degree + 1), dtype=t.dtype, order="F") if out is None else out
    design[:, 0] = 1
    if degree >= 1:
        design[:, 1] = t
    for k in range(2, degree + 1):
        np.multiply(t, design[:, k - 1], out=design[:, k])
        design[:, k] *= 2
        design[:, k] -= design[:, k - 2]
    return design


def scaled_domain(x: FloatArray) -> tuple[float, float]:
    """``(centre, half_width)`` mapping ``[min x, max x]`` onto ``[-1, 1]`` (half width 1 for one x)."""
    low, high = float(x.min()), float(x.max())
    half_width = (high - low) / 2.0
    return low + half_width, half_width if half_width > 0.0 else 1.0


def fit_polynomial(
    x: ArrayLike,
    y: ArrayLike,
    *,
    degree: int,
    sigma: ArrayLike | None = None,
    cv_folds: int = DEFAULT_CV_FOLDS,
    absolute_sigma: bool = False,
) -> FitResult:
    """Weighted least-squares polynomial ``y = c0 + c1 x + ... + cn x^n``.

    Parameters
    ----------
    x, y : array_like
        Samples (chart units); any order.
    degree : int
        Polynomial degree, 0 to 15. Needs at least ``degree + 2`` samples at ``degree + 1``
        distinct ``x`` (one residual degree of freedom).
    sigma : array_like, optional
        Standard uncertainty of each ``y`` (``y`` units).
    cv_folds : int
        Folds for the cross-validated RMSE.
    absolute_sigma : bool
        Take ``sigma`` as absolute uncertainties instead of relative weights.

    Returns
    -------
    FitResult
        ``parameters`` is ``[c0, ..., cn]`` in powers of ``x``.
    """
    degree = check_degree(degree, family="polynomial", maximum=MAX_POLYNOMIAL_DEGREE)
    samples = check_samples(x, y, sigma, minimum=degree + 2)
    folds = check_fold_count(cv_folds)
    distinct = distinct_count(samples.x)
    if distinct <= degree:
        raise ScienceInputError(
            f"a degree {degree} polynomial needs at least {degree + 1} distinct x values; the samples have {distinct}"
        )
    centre, half_width = scaled_domain(samples.x)

    def basis(values: FloatArray, out: FloatArray) -> None:
        scaled = np.subtract(values, centre, out=out[:, min(1, degree)])
        scaled /= half_width
        chebyshev_design(scaled, degree=degree, out=out)

    def extended_basis(values: LongArray) -> LongArray:
        return chebyshev_design((values - centre) / half_width, degree=degree)

    solution = solve_linear_least_squares(
        samples,
        basis,
        columns=degree + 1,
        extended_basis=extended_basis,
        folds=folds,
        rank_message=f"the samples cannot determine a degree {degree} polynomial (too few distinct x)",
    )
    summary = summarise_linear_solution(samples, solution, absolute_sigma=absolute_sigma)
    model = ChebyshevModel(solution.coefficients, centre, half_width, summary.covariance)
    options = {"degree": degree, "cv_folds": folds, "absolute_sigma": absolute_sigma}
    domain = (float(samples.x.min()), float(samples.x.max()))
    return _power_basis_result(model, solution, summary, domain=domain, options=options)


def _power_basis_result(
    model: ChebyshevModel,
    solution: LinearSolution,
    summary: LinearSummary,
    *,
    domain: tuple[float, float],
    options: dict[str, Any],
) -> FitResult:
    """The FitResult of a Chebyshev fit, reported in powers of ``x`` with the covariance carried over."""
    degree = model.coefficients.size - 1
    centre, half_width = model.centre, model.half_width
    power = chebyshev_to_power(list(solution.extended_coefficients), centre=centre, half_width=half_width)
    conversion = chebyshev_to_power_matrix(degree, centre=centre, half_width=half_width)
    covariance = conversion @ summary.covariance @ conversion.T
    return FitResult(
        family="polynomial",
        parameters=[float(value) for value in power],
        standard_errors=[float(value) for value in np.sqrt(np.maximum(np.diag(covariance), 0.0))],
        parameter_names=tuple(f"c{k}" for k in range(degree + 1)),
        covariance=covariance,
        stats=summary.stats,
        domain=domain,
        warnings=tuple(polynomial_warnings(power, domain=domain, condition=solution.condition_number)),
        options=options,
        model=model,
        noise_variance_factor=summary.variance_factor,
        typical_sigma=summary.typical_sigma,
        independent_covariance=conversion @ summary.estimate.independent @ conversion.T,
        parameter_map=conversion,
    )


def polynomial_warnings(power: FloatArray, *, domain: tuple[float, float], condition: float) -> list[str]:
    """Conditioning warnings for a polynomial reported in the power basis."""
    messages: list[str] = []
    lost = power_basis_digits_lost(power, domain=domain)
    if lost >= DIGITS_LOST_WARNING:
        messages.append(
            f"The power-basis coefficients cancel heavily over the traced range: evaluating them loses "
            f"about {lost:.0f} of 16 significant digits. Use the fitted model (or all printed digits) "
            "rather than rounded coefficients, or shift x closer to zero."
        )
    if condition > CONDITION_WARNING:
        messages.append(
            f"The samples barely determine the coefficients (condition number {condition:.2g}); "
            "consider a lower degree."
        )
    return messages
