"""Suggesting a model family: fit the candidates, rank them, prefer the simpler when it is as good.

Candidates are ranked by AICc (small-sample corrected Akaike information criterion). Every
candidate within :data:`AICC_MARGIN` of the best AICc whose cross-validated RMSE is within
:data:`CV_MARGIN` of the best CV-RMSE is considered as good; among those the one with the fewest
parameters is recommended. A difference of 2 AICc units is the usual threshold below which models
have "substantial support" (Burnham & Anderson, *Model Selection and Multimodel Inference*, 2nd ed.,
2002, sec. 2.6; from memory); the 5 % CV margin is our own choice (common practice).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from typing import Any, Final

import numpy as np
from numpy.typing import ArrayLike

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_fourier import fit_fourier
from tracedesk.science.fit_inputs import DEFAULT_CV_FOLDS, as_finite_vector
from tracedesk.science.fit_logarithmic import fit_logarithmic
from tracedesk.science.fit_nonlinear import fit_exponential, fit_power
from tracedesk.science.fit_polynomial import MAX_POLYNOMIAL_DEGREE, fit_polynomial
from tracedesk.science.fit_result import FitResult

AICC_MARGIN: Final = 2.0
CV_MARGIN: Final = 0.05


@dataclass(frozen=True, eq=False)
class Candidate:
    """One candidate model and how it fared.

    ``rank`` is its place by AICc (1 = best) or None when it could not be fitted or scored, in
    which case ``reason`` says why.
    """

    label: str
    family: str
    options: dict[str, Any]
    parameter_count: int
    aicc: float | None
    bic: float | None
    cv_rmse: float | None
    rank: int | None = None
    recommended: bool = False
    reason: str = ""
    fit: FitResult | None = field(default=None, repr=False)


@dataclass(frozen=True, eq=False)
class ModelSuggestion:
    """Ranked candidates (scored ones first, best AICc first) and the recommended one, if any."""

    recommended: Candidate | None
    candidates: tuple[Candidate, ...]


def suggest_model(
    x: ArrayLike,
    y: ArrayLike,
    *,
    sigma: ArrayLike | None = None,
    max_polynomial_degree: int = 5,
    fourier_degrees: Sequence[int] = (1, 2, 3),
    period: float | None = None,
    cv_folds: int = DEFAULT_CV_FOLDS,
) -> ModelSuggestion:
    """Fit polynomial, Fourier, exponential, power and logarithmic candidates and recommend one.

    Parameters
    ----------
    x, y : array_like
        Samples (chart units).
    sigma : array_like, optional
        Standard uncertainty of each ``y`` (``y`` units).
    max_polynomial_degree : int
        Polynomials of degree 1 up to this (at most 15) are tried.
    fourier_degrees : sequence of int
        Fourier degrees tried (empty to skip Fourier series).
    period : float, optional
        Known period for the Fourier candidates (``x`` units); estimated when omitted.
    cv_folds : int
        Folds for the cross-validated RMSE.
    """
    if not 1 <= max_polynomial_degree <= MAX_POLYNOMIAL_DEGREE:
        raise ScienceInputError(f"max_polynomial_degree must be between 1 and {MAX_POLYNOMIAL_DEGREE}")
    x_values = as_finite_vector(x, field="x")
    common: dict[str, Any] = {"sigma": sigma, "cv_folds": cv_folds}
    attempts: list[tuple[str, str, dict[str, Any], Callable[..., FitResult]]] = [
        (f"polynomial, degree {d}", "polynomial", {"degree": d}, fit_polynomial)
        for d in range(1, max_polynomial_degree + 1)
    ]
    for d in fourier_degrees:
        label = f"Fourier series, degree {d}" + ("" if period is None else f", period {period:g}")
        attempts.append((label, "fourier", {"degree": d, "period": period}, fit_fourier))
    attempts.append(("exponential", "exponential", {}, fit_exponential))
    if bool(np.all(x_values > 0)):
        attempts += [("power law", "power", {}, fit_power), ("logarithmic", "logarithmic", {}, fit_logarithmic)]
    candidates = [
        _attempt(label, family, options, fitter, x_values, y, common) for label, family, options, fitter in attempts
    ]
    return _ranked(candidates)


def _attempt(
    label: str,
    family: str,
    options: dict[str, Any],
    fitter: Callable[..., FitResult],
    x: ArrayLike,
    y: ArrayLike,
    common: dict[str, Any],
) -> Candidate:
    try:
        fit = fitter(x, y, **options, **common)
    except ScienceInputError as error:
        return Candidate(label, family, options, 0, None, None, None, reason=f"not fitted: {error}")
    count = len(fit.parameter_names) - (1 if family == "fourier" and options.get("period") is not None else 0)
    stats = fit.stats
    return Candidate(
        label,
        family,
        dict(fit.options),
        count,
        _float(stats["aicc"]),
        _float(stats["bic"]),
        _float(stats["cv_rmse"]),
        fit=fit,
    )


def _float(value: float | int | str | None) -> float | None:
    return float(value) if isinstance(value, int | float) else None


def _ranked(candidates: list[Candidate]) -> ModelSuggestion:
    scored = sorted((c for c in candidates if c.aicc is not None), key=lambda c: (c.aicc, c.parameter_count))
    unscored = [
        c if c.reason else replace(c, reason="too few samples to compute AICc for this many parameters")
        for c in candidates
        if c.aicc is None
    ]
    if not scored:
        return ModelSuggestion(None, tuple(unscored))
    best_aicc = float(scored[0].aicc or 0.0)
    cv_values = [c.cv_rmse for c in scored if c.cv_rmse is not None]
    best_cv = min(cv_values) if cv_values else None
    good = [c for c in scored if _as_good(c, best_aicc=best_aicc, best_cv=best_cv)]
    choice = min(good or scored[:1], key=lambda c: (c.parameter_count, c.aicc))
    ranked = [
        replace(
            c,
            rank=i + 1,
            recommended=c is choice,
            reason=_reason(c, choice=choice, best=scored[0], best_cv=best_cv, good=c in good),
        )
        for i, c in enumerate(scored)
    ]
    recommended = next(c for c in ranked if c.recommended)
    return ModelSuggestion(recommended, tuple(ranked + unscored))


def _as_good(candidate: Candidate, *, best_aicc: float, best_cv: float | None) -> bool:
    if candidate.aicc is None or candidate.aicc > best_aicc + AICC_MARGIN:
        return False
    if best_cv is None or candidate.cv_rmse is None:
        return True
    return bool(candidate.cv_rmse <= best_cv * (1.0 + CV_MARGIN))


def _reason(candidate: Candidate, *, choice: Candidate, best: Candidate, best_cv: float | None, good: bool) -> str:
    delta = float((candidate.aicc or 0.0) - (best.aicc or 0.0))
    cv_text = ""
    if candidate.cv_rmse is not None and best_cv:
        cv_text = f"; CV-RMSE {candidate.cv_rmse:.4g} ({100 * (candidate.cv_rmse / best_cv - 1):.1f} % above the best)"
    if candidate is choice and candidate is best:
        return f"recommended: lowest AICc{cv_text}"
    if candidate is choice:
        return (
            f"recommended: within {delta:.1f} AICc of the best ({best.label}) and of its CV-RMSE, with "
            f"{candidate.parameter_count} instead of {best.parameter_count} parameters{cv_text}"
        )
    if good:
        return (
            f"as good as the recommended model (AICc +{delta:.1f}{cv_text}) but with "
            f"{candidate.parameter_count} parameters instead of {choice.parameter_count}"
        )
    return f"AICc {delta:+.1f} relative to the best{cv_text}"
