"""Fitting equations to traces: one entry point for every model family.

:func:`fit_model` takes the samples and the JSON-style options the API receives, e.g.
``{"family": "polynomial", "degree": 3}``, ``{"family": "fourier", "degree": 2, "period": 24}`` or
``{"family": "exponential"}``, checks them, and returns a :class:`FitResult`. Bad input raises
:class:`~tracedesk.science.errors.ScienceInputError` with a message naming the problem.

Families (``x`` and ``y`` in chart units; ``sigma`` the standard uncertainty of each ``y``):

=============== ============================================= =========================================
family          model                                         options
=============== ============================================= =========================================
polynomial      c0 + c1 x + ... + cn x^n                      degree (0-15, required)
fourier         a0 + sum a_k cos(2 pi k x/P) + b_k sin(...)   degree (0-50, required), period (None:
                                                              estimate), period_bounds
exponential     a exp(b x) + c
power           a x^b + c  (x > 0)
logarithmic     a + b ln x  (x > 0)
spline          cubic smoothing spline, GCV                   smoothing (None: GCV)
interpolation   exact polynomial through equally spaced nodes degree (default: samples - 1); sigma is propagated
=============== ============================================= =========================================

All least-squares families also accept ``cv_folds`` (default 5) and ``absolute_sigma`` (default
False: sigma are relative weights and the covariance is scaled by the reduced chi-square).

Given the samples' calibration covariance factor (``calibration``), the error the calibration shares
among all samples is added to the coefficient covariance (:mod:`tracedesk.science.fit_calibration`).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any, Final

from numpy.typing import ArrayLike

from tracedesk.science.calibration_covariance import CalibrationFactor
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_calibration import with_calibration_covariance
from tracedesk.science.fit_fourier import fit_fourier
from tracedesk.science.fit_interpolation import fit_interpolation
from tracedesk.science.fit_logarithmic import fit_logarithmic
from tracedesk.science.fit_nonlinear import fit_exponential, fit_power
from tracedesk.science.fit_polynomial import MAX_POLYNOMIAL_DEGREE, fit_polynomial
from tracedesk.science.fit_result import EXTRAPOLATION_CAUTION, Band, FitResult
from tracedesk.science.fit_spline import fit_spline
from tracedesk.science.model_choice import Candidate, ModelSuggestion, suggest_model

__all__ = [
    "EXTRAPOLATION_CAUTION",
    "FAMILIES",
    "MAX_POLYNOMIAL_DEGREE",
    "Band",
    "Candidate",
    "FitResult",
    "ModelSuggestion",
    "fit_model",
    "suggest_model",
]

_COMMON: Final = frozenset({"cv_folds", "absolute_sigma"})
_FAMILY_OPTIONS: Final[Mapping[str, frozenset[str]]] = {
    "polynomial": _COMMON | {"degree"},
    "fourier": _COMMON | {"degree", "period", "period_bounds"},
    "exponential": _COMMON,
    "power": _COMMON,
    "logarithmic": _COMMON,
    "spline": _COMMON | {"smoothing"},
    "interpolation": frozenset({"degree"}),
}
_REQUIRED: Final[Mapping[str, frozenset[str]]] = {"polynomial": frozenset({"degree"}), "fourier": frozenset({"degree"})}
_FITTERS: Final[Mapping[str, Callable[..., FitResult]]] = {
    "polynomial": fit_polynomial,
    "fourier": fit_fourier,
    "exponential": fit_exponential,
    "power": fit_power,
    "logarithmic": fit_logarithmic,
    "spline": fit_spline,
    "interpolation": fit_interpolation,
}
FAMILIES: Final = tuple(_FAMILY_OPTIONS)


def fit_model(
    x: ArrayLike,
    y: ArrayLike,
    *,
    family: str,
    sigma: ArrayLike | None = None,
    calibration: CalibrationFactor | None = None,
    **options: Any,
) -> FitResult:
    """Fit the model ``family`` to samples ``(x, y)``.

    Parameters
    ----------
    x, y : array_like
        Samples (chart units), any order.
    family : str
        One of :data:`FAMILIES`.
    sigma : array_like, optional
        Standard uncertainty of each ``y`` (``y`` units, > 0); weights are ``1 / sigma^2``.
    calibration : CalibrationFactor, optional
        Covariance factor of the samples' calibration error (rows in the order of ``x``); its effect
        on the coefficients is added to their covariance, and ``stats["calibration_share"]`` says how much.
    **options
        Family options as in the module table; unknown names are refused.

    Returns
    -------
    FitResult

    Raises
    ------
    ScienceInputError
        Unknown family or option, missing degree, degree too high for the samples, non-positive
        period, ``x <= 0`` for logarithmic or power, NaN data, too few samples.
    """
    if family not in _FAMILY_OPTIONS:
        raise ScienceInputError(f"unknown model family {family!r}; choose one of {', '.join(FAMILIES)}")
    _check_option_names(family, options)
    if "absolute_sigma" in options and not isinstance(options["absolute_sigma"], bool):
        raise ScienceInputError("absolute_sigma must be true or false")
    if "period_bounds" in options and options["period_bounds"] is not None:
        options["period_bounds"] = _pair(options["period_bounds"])
    result = _FITTERS[family](x, y, sigma=sigma, **options)
    return result if calibration is None else with_calibration_covariance(result, x, sigma, calibration)


def _check_option_names(family: str, options: Mapping[str, Any]) -> None:
    allowed = _FAMILY_OPTIONS[family]
    unknown = sorted(set(options) - allowed)
    if unknown:
        raise ScienceInputError(
            f"unknown option {unknown[0]!r} for the {family} family; accepted: {', '.join(sorted(allowed)) or 'none'}"
        )
    missing = sorted(_REQUIRED.get(family, frozenset()) - set(options))
    if missing:
        raise ScienceInputError(f"the {family} family needs the option {missing[0]!r}")


def _pair(value: Any) -> tuple[float, float]:
    if isinstance(value, str) or not hasattr(value, "__len__") or len(value) != 2:
        raise ScienceInputError("period_bounds must be two numbers [shortest, longest]")
    try:
        return float(value[0]), float(value[1])
    except (TypeError, ValueError) as error:
        raise ScienceInputError("period_bounds must be two numbers [shortest, longest]") from error
