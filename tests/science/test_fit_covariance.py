"""Coefficient covariance robust to residuals correlated along the trace (tracedesk.science.fit_covariance).

statsmodels is not installed in this project, so the reference is the Newey-West formula written out
directly from the paper (Newey & West, Econometrica 55:703-708, 1987, eq. (2): Bartlett weights
``1 - j / (m + 1)``), with the AR(1) prewhitening and recolouring of Andrews & Monahan (Econometrica
60:953-966, 1992). The coverage checks are Monte Carlo simulations with known truth.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats as scipy_stats
from scipy.signal import lfilter

from tracedesk.science.fit_covariance import (
    andrews_lag,
    bartlett_long_run,
    lag1_autocorrelation,
    loewner_upper_bound,
    prewhitened_lag,
    serial_robust_covariance,
)
from tracedesk.science.fit_linear import EXACT_HAC_SAMPLES
from tracedesk.science.fit_nonlinear import fit_exponential
from tracedesk.science.fit_polynomial import chebyshev_design, fit_polynomial
from tracedesk.science.fit_result import FitResult

TRACES = 400
SAMPLES = 600


def _newey_west_from_paper(scores: np.ndarray, lag: int) -> np.ndarray:
    """``Omega = Gamma_0 + sum_{j=1}^{m} (1 - j / (m + 1)) (Gamma_j + Gamma_j^T)`` (Newey & West 1987)."""
    omega = scores.T @ scores
    for j in range(1, lag + 1):
        gamma = scores[j:].T @ scores[:-j]
        omega += (1.0 - j / (lag + 1.0)) * (gamma + gamma.T)
    return omega


def _ar1(rng: np.random.Generator, rho: float, size: tuple[int, ...], sd: float) -> np.ndarray:
    """Stationary AR(1) noise with marginal SD ``sd`` along the last axis."""
    shocks = rng.normal(0.0, sd * np.sqrt(1.0 - rho**2), size)
    shocks[..., 0] = rng.normal(0.0, sd, size[:-1])
    return np.asarray(lfilter([1.0], [1.0, -rho], shocks, axis=-1))


def _errors(fit: FitResult, *, independent: bool) -> np.ndarray:
    covariance = fit.independent_covariance if independent else fit.covariance
    assert covariance is not None
    return np.sqrt(np.diag(covariance))


@pytest.mark.parametrize("lag", [0, 1, 4, 17])
def test_window_sums_equal_the_newey_west_sum(lag: int) -> None:
    """The one-pass window-sum form equals the paper's lag-by-lag sum."""
    scores = np.random.default_rng(lag).normal(size=(80, 3))
    assert_allclose(bartlett_long_run(scores, lag), _newey_west_from_paper(scores, lag), rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("lag", [4, 17])
def test_window_sums_in_place_equal_the_newey_west_sum(lag: int) -> None:
    """Keeping the running sums in the scores array (no copy) changes nothing."""
    scores = np.asfortranarray(np.random.default_rng(lag).normal(size=(80, 3)))
    expected = _newey_west_from_paper(scores, lag)
    assert_allclose(bartlett_long_run(scores, lag, overwrite=True), expected, rtol=1e-12, atol=1e-12)


def test_weighted_shuffled_fit_reuses_the_solver_rows_faithfully() -> None:
    """The scores taken from the solver's interleaved folds give the covariance the design matrix gives.

    Reference: :func:`serial_robust_covariance` on the weighted Chebyshev design built afresh with
    numpy's Chebyshev recurrence (unsorted samples, so the trace order must be recovered too).
    """
    rng = np.random.default_rng(5)
    x = rng.uniform(0.0, 30.0, 3_001)
    sigma = rng.uniform(0.5, 2.0, x.size)
    order = np.argsort(x)
    y = 2.0 - 0.1 * x + 0.01 * x**2
    y[order] += _ar1(rng, 0.9, (x.size,), 0.3)
    fit = fit_polynomial(x, y, degree=4, sigma=sigma)
    model = fit.model
    assert isinstance(model.internal_covariance, np.ndarray)
    weights = 1.0 / sigma
    design = chebyshev_design(model.scaled(x), degree=4) * weights[:, None]
    residual = weights * (y - model.evaluate(x))
    bread = np.linalg.inv(design.T @ design)
    factor = float(residual @ residual) / (x.size - 5)
    reference = serial_robust_covariance(design, residual, x, bread=bread, classical=factor * bread, parameter_count=5)
    assert fit.stats["covariance_lag"] == reference.lag
    assert_allclose(model.internal_covariance, reference.matrix, rtol=1e-9)


def test_linear_fit_covariance_equals_prewhitened_newey_west_formula() -> None:
    """Straight line with AR(1) errors: reported covariance = the HAC sandwich written from the papers."""
    rng = np.random.default_rng(11)
    x = np.linspace(0.0, 20.0, 500)
    y = 1.5 + 0.25 * x + _ar1(rng, 0.8, (x.size,), 0.2)
    fit = fit_polynomial(x, y, degree=1)
    design = np.column_stack([np.ones_like(x), x])
    bread = np.linalg.inv(design.T @ design)
    residual = y - design @ (bread @ design.T @ y)
    rho = float(residual[1:] @ residual[:-1] / (residual @ residual))
    scores = (design @ bread) * residual[:, None]
    whitened = scores[1:] - rho * scores[:-1]
    lag = fit.stats["covariance_lag"]
    assert isinstance(lag, int)
    hac = _newey_west_from_paper(whitened, lag) / (1.0 - rho) ** 2 * x.size / (x.size - 2)
    classical = residual @ residual / (x.size - 2) * bread
    assert np.linalg.eigvalsh(hac - classical).min() > 0.0  # HAC dominates here, so it is reported as is
    assert fit.stats["covariance_estimator"] == "hac_newey_west_prewhitened"
    assert fit.stats["residual_autocorrelation"] == pytest.approx(rho, rel=1e-9)
    assert fit.covariance is not None and fit.independent_covariance is not None
    assert_allclose(fit.covariance, hac, rtol=1e-7)
    assert_allclose(fit.independent_covariance, classical, rtol=1e-9)


def _block_newey_west_reference(
    x: np.ndarray, y: np.ndarray, *, degree: int, lag: int, block: int
) -> tuple[np.ndarray, np.ndarray]:
    """The prewhitened Newey-West sandwich on sums of ``block`` consecutive prewhitened scores.

    Written from the papers with numpy's own Chebyshev basis (numpy.polynomial.chebyshev.chebvander):
    scores in trace order, AR(1) prewhitening ``v_t - rho v_{t-1}`` for t >= 1 (Andrews & Monahan),
    summed over blocks of trace positions ``[b m, b m + b)``, Newey & West's Bartlett sum over
    ``ceil((lag + 1) / b)`` blocks, recoloured by ``1 / (1 - rho)^2``.
    """
    order = np.argsort(x, kind="stable")
    x, y = x[order], y[order]
    centre, half_width = (x.max() + x.min()) / 2.0, (x.max() - x.min()) / 2.0
    design = np.polynomial.chebyshev.chebvander((x - centre) / half_width, degree)
    bread = np.linalg.inv(design.T @ design)
    residual = y - design @ (bread @ design.T @ y)
    # Andrews & Monahan keep the filter away from a unit root: |rho| <= 0.97.
    rho = float(np.clip(residual[1:] @ residual[:-1] / (residual @ residual), -0.97, 0.97))
    scores = design * residual[:, None]
    whitened = np.zeros_like(scores)
    whitened[1:] = scores[1:] - rho * scores[:-1]
    padded = np.zeros((-(-x.size // block) * block, scores.shape[1]))
    padded[: x.size] = whitened
    sums = padded.reshape(-1, block, scores.shape[1]).sum(axis=1)
    windows = -(-(lag + 1) // block)
    omega = _newey_west_from_paper(sums, windows - 1) / (1.0 - rho) ** 2 * x.size / (x.size - degree - 1)
    classical = float(residual @ residual) / (x.size - degree - 1) * bread
    return bread @ omega @ bread, classical


@pytest.mark.parametrize("count", [EXACT_HAC_SAMPLES + 3, EXACT_HAC_SAMPLES + 5])
def test_long_trace_covariance_equals_the_block_sum_formula(count: int) -> None:
    """Long traces (shuffled, n not always a multiple of the 5 folds): blocks of one sample per fold.

    The Chebyshev covariance equals the block-sum reference above to 1e-7 (rounding only).
    """
    rng = np.random.default_rng(count)
    x = np.sort(rng.uniform(0.0, 40.0, count))
    # AR(2) with a double root at 0.9: still correlated after the AR(1) prewhitening, so the
    # Bartlett window spans several blocks.
    noise = lfilter([1.0], [1.0, -1.8, 0.81], rng.normal(0.0, 0.01, count))
    y = 3.0 + 0.2 * x - 0.004 * x**2 + noise
    shuffle = rng.permutation(count)
    fit = fit_polynomial(x[shuffle], y[shuffle], degree=2)
    lag = fit.stats["covariance_lag"]
    assert isinstance(lag, int) and lag > 5  # windows span several blocks
    assert fit.stats["covariance_block"] == 5
    model = fit.model
    assert isinstance(model.internal_covariance, np.ndarray)
    reference, classical = _block_newey_west_reference(x, y, degree=2, lag=lag, block=5)
    assert np.linalg.eigvalsh(reference - classical).min() > 0.0  # HAC dominates: reported as is
    assert_allclose(model.internal_covariance, reference, rtol=1e-7)


def test_block_sums_agree_with_the_textbook_estimator_on_one_long_trace() -> None:
    """Same long trace, blocks of 5 vs every row: standard errors within 3 % (both estimate one quantity)."""
    rng = np.random.default_rng(8)
    x = np.linspace(0.0, 50.0, 30_000)
    y = 1.0 + 0.05 * x + _ar1(rng, 0.9, (x.size,), 0.2)
    fit = fit_polynomial(x, y, degree=3)
    model = fit.model
    assert isinstance(model.internal_covariance, np.ndarray)
    design = chebyshev_design(model.scaled(x), degree=3)
    residual = y - model.evaluate(x)
    bread = np.linalg.inv(design.T @ design)
    factor = float(residual @ residual) / (x.size - 4)
    exact = serial_robust_covariance(design, residual, x, bread=bread, classical=factor * bread, parameter_count=4)
    assert exact.block == 1 and fit.stats["covariance_block"] == 5
    ratio = np.sqrt(np.diag(model.internal_covariance) / np.diag(exact.matrix))
    assert np.all(np.abs(ratio - 1.0) < 0.03)


def test_long_trace_coverage_with_strongly_correlated_noise() -> None:
    """120 quadratic traces of 20,005 samples, AR(1) rho = 0.95: +-2 SE coverage >= 85 % (Monte Carlo)."""
    rng = np.random.default_rng(99)
    count = EXACT_HAC_SAMPLES + 5
    x = np.linspace(0.0, 10.0, count)
    truth = np.array([1.0, -0.4, 0.03])
    noise = _ar1(rng, 0.95, (120, count), 0.05)
    fits = [fit_polynomial(x, np.polyval(truth[::-1], x) + row, degree=2) for row in noise]
    assert all(fit.stats["covariance_block"] == 5 for fit in fits)
    assert _coverage(fits, truth, independent=False).min() >= 0.85
    assert _coverage(fits, truth, independent=True).max() <= 0.5


@pytest.mark.parametrize("seed", range(3))
def test_long_white_noise_trace_is_not_needlessly_inflated(seed: int) -> None:
    """White noise on a long trace: block-sum SEs stay within 5 % of the classical ones."""
    rng = np.random.default_rng(seed)
    x = np.sort(rng.uniform(0.0, 10.0, 40_000))
    fit = fit_polynomial(x, 2.0 - 0.3 * x + rng.normal(0.0, 0.1, x.size), degree=2)
    assert fit.stats["covariance_block"] == 5
    ratio = _errors(fit, independent=False) / _errors(fit, independent=True)
    assert ratio.min() >= 1.0 - 1e-12
    assert ratio.max() <= 1.05


@pytest.mark.parametrize("rho", [0.0, 0.6, 0.97])
@pytest.mark.parametrize("count", [4, 9, 2_000])
def test_lag_from_autocovariances_equals_the_lag_of_the_filtered_series(rho: float, count: int) -> None:
    """Andrews' lag computed from S0, S1, S2 equals the one of the explicitly filtered residuals."""
    residual = _ar1(np.random.default_rng(count), 0.8, (count,), 1.0)
    filtered = residual[1:] - rho * residual[:-1]
    assert prewhitened_lag(residual, rho) == andrews_lag(lag1_autocorrelation(filtered), filtered.size)


def test_loewner_bound_dominates_both() -> None:
    """``A + (B - A)_+`` minus either input is positive semidefinite (the 'never smaller' promise)."""
    rng = np.random.default_rng(3)
    first, second = (m @ m.T for m in rng.normal(size=(2, 4, 4)))
    bound = loewner_upper_bound(first, second)
    for matrix in (first, second):
        assert np.linalg.eigvalsh(bound - matrix).min() > -1e-12 * np.abs(bound).max()


def _coverage(fits: list[FitResult], truth: np.ndarray, *, independent: bool) -> np.ndarray:
    inside = [np.abs(_values(fit) - truth) <= 2.0 * _errors(fit, independent=independent) for fit in fits]
    return np.mean(inside, axis=0)


def _values(fit: FitResult) -> np.ndarray:
    parameters = fit.parameters
    return np.array(list(parameters.values()) if isinstance(parameters, dict) else parameters, dtype=float)


def test_polynomial_coverage_with_strongly_correlated_noise() -> None:
    """400 cubic traces, AR(1) noise rho = 0.9: +-2 SE holds the truth in >= 85 % (Monte Carlo)."""
    rng = np.random.default_rng(2024)
    x = np.linspace(0.0, 10.0, SAMPLES)
    truth = np.array([1.0, 0.8, -0.12, 0.006])
    noise = _ar1(rng, 0.9, (TRACES, SAMPLES), 0.05)
    fits = [fit_polynomial(x, np.polyval(truth[::-1], x) + row, degree=3, cv_folds=2) for row in noise]
    assert _coverage(fits, truth, independent=False).min() >= 0.85
    # The independent-error formula covers far less: the test can tell the two apart.
    assert _coverage(fits, truth, independent=True).max() <= 0.6


def test_exponential_coverage_with_strongly_correlated_noise() -> None:
    """400 traces of 3 exp(-0.4 x) + 1 with AR(1) noise rho = 0.9: +-2 SE coverage >= 85 % (Monte Carlo)."""
    rng = np.random.default_rng(77)
    x = np.linspace(0.0, 8.0, SAMPLES)
    truth = np.array([3.0, -0.4, 1.0])
    clean = truth[0] * np.exp(truth[1] * x) + truth[2]
    noise = _ar1(rng, 0.9, (TRACES, SAMPLES), 0.02)
    fits = [fit_exponential(x, clean + row, cv_folds=2) for row in noise]
    assert _coverage(fits, truth, independent=False).min() >= 0.85
    assert _coverage(fits, truth, independent=True).max() <= 0.6


@pytest.mark.parametrize("seed", range(10))
def test_independent_noise_is_not_needlessly_inflated(seed: int) -> None:
    """White noise: robust SEs stay within 15 % of the classical ones (and never below them)."""
    rng = np.random.default_rng(seed)
    x = np.sort(rng.uniform(0.0, 10.0, SAMPLES))
    y = 2.0 - 0.3 * x + 0.02 * x**2 + rng.normal(0.0, 0.1, x.size)
    fit = fit_polynomial(x, y, degree=2)
    ratio = _errors(fit, independent=False) / _errors(fit, independent=True)
    assert ratio.min() >= 1.0 - 1e-12
    assert ratio.max() <= 1.15
    assert fit.stats["standard_error_inflation"] == pytest.approx(ratio.max(), rel=1e-9)


def test_prediction_band_uses_the_residual_sd_in_value_units() -> None:
    """Weighted fit: prediction half-width^2 = confidence half-width^2 + (t * residual SD)^2."""
    rng = np.random.default_rng(5)
    x = np.linspace(0.0, 10.0, 200)
    sigma = rng.uniform(0.05, 0.2, x.size)
    fit = fit_polynomial(x, 1.0 + 0.5 * x + rng.normal(0.0, 1.0, x.size) * sigma, degree=1, sigma=sigma)
    at = np.array([2.0, 7.5])
    confidence, prediction = fit.confidence_band(at), fit.prediction_band(at)
    residual_sd = fit.stats["residual_sd"]
    assert isinstance(residual_sd, float)
    dof = fit.stats["dof"]
    assert isinstance(dof, int)
    t = scipy_stats.t.ppf(0.975, dof)  # reference Student t quantile (scipy)
    expected = np.sqrt((confidence.upper - confidence.fitted) ** 2 + (t * residual_sd) ** 2)
    assert_allclose(prediction.upper - prediction.fitted, expected, rtol=1e-12)
