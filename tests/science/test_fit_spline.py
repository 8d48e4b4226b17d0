"""Smoothing spline: agreement with scipy.interpolate.make_smoothing_spline and its own linear algebra.

References: scipy.interpolate.make_smoothing_spline (general-purpose reference library); the smoothing
spline's third-derivative jump relation (Green & Silverman 1994, sec. 2.3, from memory) checked
numerically against a spline fitted with a known penalty.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.interpolate import make_smoothing_spline

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_inputs import merge_duplicate_x
from tracedesk.science.fit_spline import fit_spline, recovered_smoothing


def _noisy_sine(count: int, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = np.sort(rng.uniform(0.0, 10.0, count))
    return x, np.sin(x) + rng.normal(0.0, 0.2, count)


def test_gcv_spline_matches_scipy() -> None:
    """Same curve as make_smoothing_spline(lam=None), which chooses the penalty by GCV."""
    x, y = _noisy_sine(120)
    fit = fit_spline(x, y)
    grid = np.linspace(0.5, 9.5, 50)
    assert_allclose(fit.predict(grid), make_smoothing_spline(x, y)(grid), rtol=1e-12, atol=1e-12)
    assert fit.family == "spline"


@pytest.mark.parametrize("lam", [1e-3, 0.3, 20.0])
def test_recovered_penalty_equals_the_one_used(lam: float) -> None:
    """With a given penalty the recovered one (third-derivative jumps) and the curve are the same."""
    x, y = _noisy_sine(60, seed=1)
    weights = np.random.default_rng(2).uniform(0.5, 2.0, x.size)
    fit = fit_spline(x, y, sigma=1.0 / weights, smoothing=lam)
    reference = make_smoothing_spline(x, y, w=weights**2, lam=lam)
    assert_allclose(fit.predict(x), reference(x), rtol=1e-10, atol=1e-10)
    merged = merge_duplicate_x(x, y, weights)
    assert recovered_smoothing(reference, merged) == pytest.approx(lam, rel=1e-6)


def test_effective_parameters_equal_the_hat_matrix_trace() -> None:
    """dof = n - trace(H), H built column by column from make_smoothing_spline on unit vectors."""
    x, y = _noisy_sine(40, seed=3)
    fit = fit_spline(x, y, smoothing=0.5)
    hat = np.column_stack([make_smoothing_spline(x, unit, lam=0.5)(x) for unit in np.eye(x.size)])
    assert fit.stats["dof"] == pytest.approx(x.size - np.trace(hat), rel=1e-9)


def test_bands_and_standard_errors_exist_for_moderate_sizes() -> None:
    """Bands come from the linear smoother; the prediction band is the wider one."""
    x, y = _noisy_sine(150, seed=4)
    fit = fit_spline(x, y)
    at = np.array([2.0, 5.0])
    confidence, prediction = fit.confidence_band(at), fit.prediction_band(at)
    assert np.all(confidence.upper > confidence.lower)
    assert np.all(prediction.upper - prediction.lower > confidence.upper - confidence.lower)
    residual_sd = fit.stats["residual_sd"]
    assert residual_sd is not None
    assert 0.15 < residual_sd < 0.25  # the noise SD is 0.2
    assert any("bias" in message for message in fit.warnings)


def test_duplicate_x_are_averaged_with_a_warning() -> None:
    """Repeated x (a pen trace touching the same column twice) are merged into their mean."""
    x = np.array([0.0, 1.0, 1.0, 2.0, 3.0, 4.0, 5.0])
    y = np.array([0.0, 1.0, 3.0, 4.0, 9.0, 16.0, 25.0])
    fit = fit_spline(x, y, smoothing=0.0)
    assert fit.predict(np.array([1.0]))[0] == pytest.approx(2.0, abs=1e-9)
    assert any("averaged" in message for message in fit.warnings)


def test_too_few_distinct_samples() -> None:
    """A cubic smoothing spline needs 5 distinct x."""
    with pytest.raises(ScienceInputError, match="5 distinct x"):
        fit_spline([0.0, 1.0, 1.0, 2.0, 3.0], [1.0, 2.0, 3.0, 4.0, 5.0])
    with pytest.raises(ScienceInputError, match="smoothing must be"):
        fit_spline(np.arange(6.0), np.arange(6.0), smoothing=-1.0)
