"""Exponential, power and logarithmic fits: parameter recovery and agreement with scipy.optimize.curve_fit.

References: noiseless data generated from known parameters (the answer is the generating values);
scipy.optimize.curve_fit (general-purpose reference library) for estimates and covariance on noisy data.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import curve_fit

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_logarithmic import fit_logarithmic
from tracedesk.science.fit_nonlinear import fit_exponential, fit_power
from tracedesk.science.fit_result import FitResult


def _abc(fit: FitResult) -> list[float]:
    assert isinstance(fit.parameters, dict)
    return [float(fit.parameters[name]) for name in fit.parameter_names]  # type: ignore[arg-type]


@pytest.mark.parametrize(("a", "b", "c"), [(2.5, -0.3, 1.2), (-4.0, 0.8, 10.0), (0.01, 1.5, -3.0)])
def test_exponential_recovers_noiseless_parameters(a: float, b: float, c: float) -> None:
    """y = a exp(b x) + c sampled without noise: the generating parameters come back."""
    x = np.linspace(0.0, 6.0, 40)
    fit = fit_exponential(x, a * np.exp(b * x) + c)
    assert_allclose(_abc(fit), [a, b, c], rtol=1e-8)
    assert fit.warnings == ()


def test_exponential_far_from_the_origin() -> None:
    """x in [1000, 1010]: the fit works on the scaled range and reports a for x measured from 0."""
    x = np.linspace(1000.0, 1010.0, 30)
    y = 3.0 * np.exp(0.2 * (x - 1000.0)) - 1.0
    fit = fit_exponential(x, y)
    assert_allclose(_abc(fit), [3.0 * np.exp(-200.0), 0.2, -1.0], rtol=1e-8)
    assert_allclose(fit.predict(x), y, rtol=1e-10)


@pytest.mark.parametrize(("a", "b", "c"), [(3.0, 1.7, -2.0), (3.0, -0.5, 7.0), (0.2, 0.5, 0.0)])
def test_power_recovers_noiseless_parameters(a: float, b: float, c: float) -> None:
    """y = a x^b + c for x > 0 without noise."""
    x = np.linspace(0.5, 20.0, 50)
    assert_allclose(_abc(fit_power(x, a * x**b + c)), [a, b, c], rtol=1e-8, atol=1e-10)


def test_logarithmic_recovers_noiseless_parameters() -> None:
    """y = a + b ln x without noise."""
    x = np.geomspace(0.1, 100.0, 30)
    fit = fit_logarithmic(x, 1.5 - 2.0 * np.log(x))
    assert_allclose(_abc(fit), [1.5, -2.0], rtol=1e-12)


def test_exponential_matches_curve_fit_on_noisy_data() -> None:
    """Estimates and covariance agree with scipy.optimize.curve_fit (same least-squares problem)."""
    rng = np.random.default_rng(8)
    x = np.linspace(0.0, 5.0, 60)
    sigma = rng.uniform(0.02, 0.1, x.size)
    y = 2.0 * np.exp(-0.7 * x) + 0.5 + rng.normal(0.0, 1.0, x.size) * sigma

    def model(t: np.ndarray, a: float, b: float, c: float) -> np.ndarray:
        return a * np.exp(b * t) + c

    reference, covariance = curve_fit(model, x, y, p0=[1.0, -1.0, 0.0], sigma=sigma)
    fit = fit_exponential(x, y, sigma=sigma)
    assert_allclose(_abc(fit), reference, rtol=1e-6)
    assert fit.covariance is not None
    # curve_fit differentiates numerically, so its covariance is good to ~1e-4 only.
    assert_allclose(fit.covariance, covariance, rtol=1e-3)


def test_power_and_logarithmic_match_curve_fit_covariance() -> None:
    """Power law and logarithm on noisy data vs scipy.optimize.curve_fit."""
    rng = np.random.default_rng(9)
    x = np.linspace(1.0, 30.0, 50)
    y = 2.0 * x**0.6 + 1.0 + rng.normal(0.0, 0.05, x.size)
    reference, covariance = curve_fit(lambda t, a, b, c: a * t**b + c, x, y, p0=[1.0, 1.0, 0.0])
    fit = fit_power(x, y)
    assert_allclose(_abc(fit), reference, rtol=1e-6)
    assert fit.covariance is not None
    assert_allclose(fit.covariance, covariance, rtol=1e-4)
    log_reference, log_covariance = curve_fit(lambda t, a, b: a + b * np.log(t), x, y)
    log_fit = fit_logarithmic(x, y)
    assert_allclose(_abc(log_fit), log_reference, rtol=1e-8)
    # curve_fit's covariance assumes independent errors: compare the classical one, which the
    # reported covariance never undercuts (these residuals are systematic: a log law misfits x^0.6).
    assert log_fit.independent_covariance is not None
    assert_allclose(log_fit.independent_covariance, log_covariance, rtol=1e-6)


def test_nearly_straight_data_warn_about_a_and_c() -> None:
    """A straight line offered to the exponential model: a and c are not separately determined."""
    rng = np.random.default_rng(3)
    x = np.linspace(0.0, 10.0, 40)
    fit = fit_exponential(x, 3 * x + 1 + rng.normal(0.0, 0.05, x.size))
    assert any("too weak to tell a from c" in message for message in fit.warnings)


def test_prediction_band_of_a_nonlinear_fit() -> None:
    """The prediction band is wider than the confidence band by about the residual SD."""
    rng = np.random.default_rng(6)
    x = np.linspace(0.0, 6.0, 200)
    fit = fit_exponential(x, 2.0 * np.exp(-0.5 * x) + 1.0 + rng.normal(0.0, 0.1, x.size))
    at = np.array([1.0, 3.0])
    confidence = fit.confidence_band(at)
    prediction = fit.prediction_band(at)
    assert np.all(prediction.upper - prediction.lower > confidence.upper - confidence.lower)
    residual_sd = fit.stats["residual_sd"]
    assert residual_sd is not None
    assert_allclose((prediction.upper - prediction.lower) / 2, 1.97 * residual_sd, rtol=0.05)


@pytest.mark.parametrize("fitter", [fit_power, fit_logarithmic])
def test_non_positive_x_is_refused(fitter: object) -> None:
    """ln(x) needs x > 0: the message names the problem and the first offending sample."""
    with pytest.raises(ScienceInputError, match=r"x > 0.*index 1"):
        fitter([1.0, 0.0, 2.0, 3.0, 4.0], [1.0, 2.0, 3.0, 4.0, 5.0])  # type: ignore[operator]


def test_too_few_samples_for_three_parameters() -> None:
    """Three parameters and one residual degree of freedom need 4 samples."""
    with pytest.raises(ScienceInputError, match="at least 4 samples"):
        fit_exponential([0.0, 1.0, 2.0], [1.0, 2.0, 4.0])
    with pytest.raises(ScienceInputError, match="3 or more distinct x"):
        fit_exponential([0.0, 0.0, 1.0, 1.0], [1.0, 2.0, 4.0, 5.0])
