"""The residual standard deviation every fit reports is in ``y`` units, weighted fit or not.

References: numpy.polyfit (``full=True`` returns the residual sum of squares; ``w = 1 / sigma`` weights the
unsquared residuals, per its documentation) and scipy.stats.linregress (its slope standard error is
``s / sqrt(sum (x - xbar)^2)``), both general-purpose reference libraries named in REFERENCES.md. The
"degrees-of-freedom corrected" SD ``sqrt(SSR / (n - p))`` is the textbook definition (common practice).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats as scipy_stats

from tracedesk.science.fit_inputs import FloatArray
from tracedesk.science.fitting import fit_model

# A day of a fictional reservoir level: metres against hours, 0.06 m of scatter, 0.02 m stated uncertainty.
HOURS = np.linspace(0.5, 24.0, 96)
NOISE_M = 0.06
SIGMA_M = 0.02


def _level(seed: int) -> FloatArray:
    rng = np.random.default_rng(seed)
    clean = 2.0 + 0.3 * np.sin(2 * np.pi * HOURS / 24.0) + 0.01 * HOURS
    level: FloatArray = clean + rng.normal(0.0, NOISE_M, HOURS.size)
    return level


def _plain_sd(x: FloatArray, y: FloatArray, fitted: FloatArray, parameters: float) -> float:
    residual = y - fitted
    return float(np.sqrt(residual @ residual / (x.size - parameters)))


@pytest.mark.parametrize("degree", [0, 1, 2, 3, 5])
def test_unweighted_residual_sd_matches_numpy_polyfit(degree: int) -> None:
    """sqrt(SSR / (n - p)) with SSR from numpy.polyfit(full=True) on the same samples."""
    y = _level(degree)
    _, ssr, _, _, _ = np.polyfit(HOURS, y, degree, full=True)
    fit = fit_model(HOURS, y, family="polynomial", degree=degree)
    expected = float(np.sqrt(ssr[0] / (HOURS.size - degree - 1)))
    assert fit.stats["residual_sd"] == pytest.approx(expected, rel=1e-9)
    assert fit.stats["reduced_chi_square"] is None  # no uncertainties given: nothing to compare against


def test_straight_line_residual_sd_matches_scipy_linregress() -> None:
    """scipy.stats.linregress: slope standard error * sqrt(sum (x - xbar)^2) is the residual SD."""
    y = _level(11)
    line = scipy_stats.linregress(HOURS, y)
    expected = line.stderr * np.sqrt(np.sum((HOURS - HOURS.mean()) ** 2))
    assert fit_model(HOURS, y, family="polynomial", degree=1).stats["residual_sd"] == pytest.approx(expected, rel=1e-9)


def test_weighted_residual_sd_is_in_value_units() -> None:
    """The workbench case: 0.06 m scatter with 0.02 m stated uncertainty reads ~0.06 m, not ~3 (numpy.polyfit)."""
    y = _level(4)
    sigma = np.full(HOURS.size, SIGMA_M)
    coefficients = np.polyfit(HOURS, y, 3, w=1.0 / sigma)
    expected = _plain_sd(HOURS, y, np.polyval(coefficients, HOURS), 4)
    fit = fit_model(HOURS, y, family="polynomial", degree=3, sigma=sigma)
    residual_sd = fit.stats["residual_sd"]
    assert residual_sd == pytest.approx(expected, rel=1e-9)
    assert residual_sd is not None and 0.045 < float(residual_sd) < 0.075  # the noise SD is 0.06 m
    # With one sigma for all samples chi^2 / dof is exactly (s / sigma)^2: about 9 here, flagging that the
    # stated 0.02 m understates the scatter.
    assert fit.stats["reduced_chi_square"] == pytest.approx((float(residual_sd) / SIGMA_M) ** 2, rel=1e-9)


def test_weighted_residual_sd_matches_numpy_polyfit_with_unequal_sigma() -> None:
    """Unequal sigma: the plain residuals of numpy.polyfit(w = 1 / sigma), over n - p."""
    rng = np.random.default_rng(21)
    sigma = rng.uniform(0.01, 0.2, HOURS.size)
    y = 1.0 + 0.2 * HOURS - 0.004 * HOURS**2 + rng.normal(0.0, 1.0, HOURS.size) * sigma
    coefficients = np.polyfit(HOURS, y, 2, w=1.0 / sigma)
    fit = fit_model(HOURS, y, family="polynomial", degree=2, sigma=sigma)
    expected = _plain_sd(HOURS, y, np.polyval(coefficients, HOURS), 3)
    assert fit.stats["residual_sd"] == pytest.approx(expected, rel=1e-8)
    chi2 = float(np.sum(((y - np.polyval(coefficients, HOURS)) / sigma) ** 2))
    assert fit.stats["reduced_chi_square"] == pytest.approx(chi2 / (HOURS.size - 3), rel=1e-8)


FAMILIES = [
    ("polynomial", {"degree": 3}),
    ("fourier", {"degree": 2, "period": 24.0}),
    ("fourier", {"degree": 1}),
    ("exponential", {}),
    ("power", {}),
    ("logarithmic", {}),
    ("spline", {}),
]


@pytest.mark.parametrize(("family", "options"), FAMILIES)
def test_every_family_reports_residual_sd_of_its_own_residuals(family: str, options: dict[str, object]) -> None:
    """Weighted fit of each family: the SD equals sqrt(sum (y - f(x))^2 / dof) of its own predictions."""
    y = _level(7)
    sigma = np.random.default_rng(8).uniform(0.01, 0.05, HOURS.size)
    fit = fit_model(HOURS, y, family=family, sigma=sigma, **options)
    dof = fit.stats["dof"]
    assert dof is not None
    residual = y - fit.predict(HOURS)
    assert fit.stats["residual_sd"] == pytest.approx(np.sqrt(residual @ residual / float(dof)), rel=1e-9)
    assert fit.stats["reduced_chi_square"] == pytest.approx(np.sum((residual / sigma) ** 2) / float(dof), rel=1e-6)


@pytest.mark.parametrize(("family", "options"), [f for f in FAMILIES if f[0] != "spline"])
def test_residual_sd_follows_the_value_unit_not_the_sigma_scale(family: str, options: dict[str, object]) -> None:
    """Metres -> centimetres scales the SD by 100; scaling only sigma leaves it alone (relative weights)."""
    y = _level(9)
    sigma = np.random.default_rng(10).uniform(0.01, 0.05, HOURS.size)
    metres = fit_model(HOURS, y, family=family, sigma=sigma, **options)
    centimetres = fit_model(HOURS, 100.0 * y, family=family, sigma=100.0 * sigma, **options)
    loose = fit_model(HOURS, y, family=family, sigma=1000.0 * sigma, **options)
    residual_sd = metres.stats["residual_sd"]
    assert residual_sd is not None
    # 1e-4, not rounding level: the iterative exponential and power solvers stop at slightly different points
    # when the weights are rescaled (a weighted figure would be off by a factor 100 or 1000, not 1e-4).
    assert centimetres.stats["residual_sd"] == pytest.approx(100.0 * float(residual_sd), rel=1e-4)
    assert loose.stats["residual_sd"] == pytest.approx(float(residual_sd), rel=1e-4)
    assert centimetres.stats["reduced_chi_square"] == pytest.approx(metres.stats["reduced_chi_square"], rel=1e-4)


def test_spline_residual_sd_pools_merged_duplicates() -> None:
    """Repeated x are merged for the spline, but the SD counts every original sample: sqrt(SSR / (N - p_eff))."""
    rng = np.random.default_rng(12)
    x = np.repeat(np.linspace(0.0, 10.0, 40), 3)
    y = np.sin(x) + rng.normal(0.0, 0.2, x.size)
    fit = fit_model(x, y, family="spline")
    count, dof = fit.stats["n"], fit.stats["dof"]
    assert count == 40 and dof is not None
    effective = 40 - float(dof)
    expected = _plain_sd(x, y, fit.predict(x), effective)
    assert fit.stats["residual_sd"] == pytest.approx(expected, rel=1e-9)
    assert 0.17 < expected < 0.23  # the noise SD is 0.2


def test_exact_interpolation_has_no_residual_sd() -> None:
    """A curve through its nodes by construction has no residual spread to report."""
    fit = fit_model(np.arange(4.0), np.array([1.0, 3.0, 2.0, 5.0]), family="interpolation")
    assert fit.stats["residual_sd"] is None
    assert fit.stats["reduced_chi_square"] is None
