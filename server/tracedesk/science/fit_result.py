"""The result of fitting a model to a trace: parameters, uncertainty, statistics and evaluation.

:class:`FitResult` is what the web layer serialises (see :meth:`FitResult.to_dict`). Parameters are
reported in the shape the API documents for each family (power-basis list for polynomials, named
values otherwise), while evaluation and bands use the family's internal, well-conditioned form
(:class:`FittedModel`), so printing rounded coefficients never degrades the fitted curve itself.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Final, Protocol

import numpy as np
from numpy.typing import ArrayLike

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_covariance import standard_error_inflation
from tracedesk.science.fit_inputs import BoolArray, FloatArray, check_level
from tracedesk.science.fit_stats import NO_BAND_MESSAGE, StatsDict, student_t_quantiles

EXTRAPOLATION_CAUTION: Final = (
    "Some requested x values lie outside the traced range; values there are extrapolated from the "
    "fitted equation and are not measurements."
)

Parameters = list[float] | dict[str, float | list[float]]


class FittedModel(Protocol):
    """A fitted curve in its internal parametrisation ``theta`` (the one the solver used)."""

    def evaluate(self, x: FloatArray) -> FloatArray:
        """Model values at ``x`` (``y`` units)."""
        ...

    def parameter_gradient(self, x: FloatArray) -> FloatArray:
        """``d f(x) / d theta``, shape ``(len(x), len(theta))``."""
        ...

    @property
    def internal_covariance(self) -> FloatArray | None:
        """Covariance of ``theta``; None when the family cannot provide one."""
        ...


@dataclass(frozen=True, eq=False)
class Band:
    """A confidence or prediction band around a fitted curve at chosen ``x``.

    ``lower``/``upper`` are ``fitted -/+ t * sd`` with Student's t for the fit's residual degrees of
    freedom. ``outside_domain`` flags ``x`` beyond the traced range, where ``caution`` is set.
    """

    kind: str
    level: float
    x: FloatArray
    fitted: FloatArray
    lower: FloatArray
    upper: FloatArray
    outside_domain: BoolArray
    caution: str | None


@dataclass(frozen=True, eq=False)
class FitResult:
    """A model fitted to samples, with its uncertainty and statistics.

    Attributes
    ----------
    family : str
        ``"polynomial"``, ``"fourier"``, ``"exponential"``, ``"power"``, ``"logarithmic"``,
        ``"spline"`` or ``"interpolation"``.
    parameters : list or dict
        Polynomial: ``[c0, ..., cn]`` in powers of the original ``x``. Fourier: ``{"a0", "a1", "b1",
        ..., "period"}``. Exponential and power: ``{"a", "b", "c"}``. Logarithmic: ``{"a", "b"}``.
        Spline: ``{"knots", "coefficients", "degree", "smoothing"}``. Interpolation: ``{"nodes",
        "values", "weights", "coefficients"}``.
    standard_errors : list or dict
        Same shape as ``parameters`` (zeros for parameters held fixed or exact).
    parameter_names : tuple of str
        Order of the rows and columns of ``covariance``.
    covariance : ndarray or None
        Parameter covariance in the reported parametrisation.
    stats : dict
        ``n, dof, residual_sd, reduced_chi_square, r_squared, aicc, bic, cv_rmse, condition_number``
        (None where undefined); ``residual_sd`` is in ``y`` units also for weighted fits, and
        ``reduced_chi_square`` (weighted fits only) is the dimensionless weighted counterpart.
        Least-squares fits add how the covariance was estimated (see
        :mod:`tracedesk.science.fit_covariance`): ``covariance_estimator``, ``covariance_lag``,
        ``residual_autocorrelation`` (lag 1, in trace order) and ``standard_error_inflation`` (largest
        ratio of a reported standard error to the independent-error one).
    domain : tuple of float
        ``(xmin, xmax)`` of the samples: the traced range.
    warnings : tuple of str
        Conditions the user should know about (ill-conditioning, slow convergence, ...).
    options : dict
        Options the fit used, e.g. ``{"degree": 3}``, enough to repeat it.
    independent_covariance : ndarray or None
        The classical covariance in the reported parametrisation, which assumes independent errors
        (for comparison; ``covariance`` is never smaller).
    parameter_map : ndarray or None
        ``d reported / d internal`` parameters (linear part of the reparametrisation), shape
        ``(len(parameter_names), len(theta))``; None when the reported parameters are the internal
        ones (padded with zero rows for a parameter held fixed, e.g. a known Fourier period).
    covariance_dof : float or None
        Degrees of freedom of the covariance's own part (excluding the calibration's): None for the
        fit's residual ``dof`` (estimated from the residuals), infinity when it was propagated from
        given uncertainties (exact interpolation).
    calibration_covariance : ndarray or None
        The calibration's part of ``model.internal_covariance`` (internal parameters), if added.
    calibration_dof : float
        Degrees of freedom of the calibration's click uncertainty (control-point residual dof).

    Bands combine the two parts with the Welch-Satterthwaite effective degrees of freedom
    ``nu = u^4 / (u_fit^4 / nu_fit + u_cal^4 / nu_cal)`` at each ``x`` (GUM, JCGM 100:2008, G.4.1), so
    a calibration fitted from a few control points widens the band through its Student t factor.
    """

    family: str
    parameters: Parameters
    standard_errors: Parameters
    parameter_names: tuple[str, ...]
    covariance: FloatArray | None
    stats: StatsDict
    domain: tuple[float, float]
    warnings: tuple[str, ...]
    options: dict[str, Any]
    model: FittedModel = field(repr=False)
    noise_variance_factor: float = field(default=0.0, repr=False)
    typical_sigma: float = field(default=1.0, repr=False)
    independent_covariance: FloatArray | None = field(default=None, repr=False)
    parameter_map: FloatArray | None = field(default=None, repr=False)
    covariance_dof: float | None = field(default=None, repr=False)
    calibration_covariance: FloatArray | None = field(default=None, repr=False)
    calibration_dof: float = field(default=math.inf, repr=False)

    def __post_init__(self) -> None:
        # Said in the reported parametrisation, the one whose standard errors the user reads.
        if self.covariance is not None and self.independent_covariance is not None:
            self.stats["standard_error_inflation"] = standard_error_inflation(
                self.independent_covariance, self.covariance
            )

    def predict(self, x: ArrayLike) -> FloatArray:
        """Fitted values (``y`` units) at ``x``; check :meth:`outside_domain` before trusting them."""
        values = np.asarray(x, dtype=np.float64)
        return self.model.evaluate(values.ravel()).reshape(values.shape)

    def outside_domain(self, x: ArrayLike) -> BoolArray:
        """True where ``x`` lies outside the traced range ``domain`` (extrapolation)."""
        values = np.asarray(x, dtype=np.float64)
        flags: BoolArray = (values < self.domain[0]) | (values > self.domain[1])
        return flags

    def confidence_band(self, x: ArrayLike, *, level: float = 0.95) -> Band:
        """Band for the fitted curve itself (uncertainty of the mean response) at ``x``."""
        return self._band(x, level=level, kind="confidence", sigma=None)

    def prediction_band(self, x: ArrayLike, *, level: float = 0.95, sigma: float | None = None) -> Band:
        """Band expected to hold a new sample at ``x`` with probability ``level``.

        Its variance is the confidence band's plus one new sample's: ``residual_sd^2`` by default,
        or ``sigma`` (``y`` units, scaled like the fitting sigmas) when given.
        """
        return self._band(x, level=level, kind="prediction", sigma=sigma)

    def _band(self, x: ArrayLike, *, level: float, kind: str, sigma: float | None) -> Band:
        level = check_level(level)
        values = np.atleast_1d(np.asarray(x, dtype=np.float64)).ravel()
        covariance = self.model.internal_covariance
        if covariance is None:
            raise ScienceInputError(f"the {self.family} fit carries no covariance, so it has no band")
        gradient = self.model.parameter_gradient(values)
        variance = np.maximum(np.einsum("ij,jk,ik->i", gradient, covariance, gradient), 0.0)
        calibration = np.zeros_like(variance)
        if self.calibration_covariance is not None:
            calibration = np.einsum("ij,jk,ik->i", gradient, self.calibration_covariance, gradient)
            calibration = np.clip(calibration, 0.0, variance)
        if kind == "prediction":
            variance = variance + self._new_sample_variance(sigma)
        multiplier = self._coverage_factor(level, fit_part=variance - calibration, calibration_part=calibration)
        half_width = multiplier * np.sqrt(variance)
        fitted = self.model.evaluate(values)
        outside = self.outside_domain(values)
        caution = EXTRAPOLATION_CAUTION if bool(outside.any()) else None
        return Band(kind, level, values, fitted, fitted - half_width, fitted + half_width, outside, caution)

    def _coverage_factor(self, level: float, *, fit_part: FloatArray, calibration_part: FloatArray) -> FloatArray:
        """Student t factor per point with the Welch-Satterthwaite degrees of freedom of the two parts."""
        dof = self.stats["dof"] if self.covariance_dof is None else self.covariance_dof
        fit_dof = float(dof if dof is not None else 0)
        total = fit_part + calibration_part
        if fit_dof <= 0.0 and (bool(np.any(fit_part > 0.0)) or not bool(np.any(total > 0.0))):
            raise ScienceInputError(NO_BAND_MESSAGE)
        with np.errstate(divide="ignore", invalid="ignore"):
            spread = np.where(fit_part > 0.0, fit_part**2 / fit_dof, 0.0)
            spread = spread + np.where(calibration_part > 0.0, calibration_part**2 / self.calibration_dof, 0.0)
            effective = np.where(spread > 0.0, total**2 / spread, math.inf)
        return student_t_quantiles(level, effective)

    def _new_sample_variance(self, sigma: float | None) -> float:
        """Variance of one new sample (``y`` units squared) for a prediction band.

        By default the residual SD squared, the observed scatter in ``y`` units (the same for
        weighted and unweighted fits); with an explicit ``sigma``, that uncertainty scaled like the
        fitting sigmas (by the reduced chi-square unless ``absolute_sigma``).
        """
        residual_sd = self.stats.get("residual_sd")
        if sigma is None and isinstance(residual_sd, int | float):
            return float(residual_sd) ** 2
        new_sigma = self.typical_sigma if sigma is None else float(sigma)
        return self.noise_variance_factor * new_sigma**2

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary (lists and floats only; NaN and infinity become None)."""
        covariance = None if self.covariance is None else _json_value(self.covariance.tolist())
        return {
            "family": self.family,
            "parameters": _json_value(self.parameters),
            "standard_errors": _json_value(self.standard_errors),
            "parameter_names": list(self.parameter_names),
            "covariance": covariance,
            "stats": _json_value(self.stats),
            "domain": _json_value(list(self.domain)),
            "warnings": list(self.warnings),
            "options": _json_value(self.options),
        }


def _json_value(value: Any) -> Any:
    if isinstance(value, dict):
        return {str(key): _json_value(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [_json_value(item) for item in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value
