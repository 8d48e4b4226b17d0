"""Polynomial least squares against NIST StRD certified values and general-purpose reference libraries.

References: NIST StRD linear least squares (Wampler1-5 generated from their formulas in REFERENCES.md;
Norris.dat and Pontius.dat in tests/science/data, see its README), numpy.polynomial.Polynomial.fit and
scipy.linalg.lstsq (general-purpose reference libraries named in REFERENCES.md).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import scipy.linalg
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.polynomial import Polynomial
from numpy.testing import assert_allclose

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_inputs import FloatArray
from tracedesk.science.fit_polynomial import fit_polynomial

DATA = Path(__file__).parent / "data"

# NIST StRD Wampler: x = 0..20 and the residual pattern e, orthogonal to polynomials of degree <= 5.
WAMPLER_X = np.arange(21.0)
# The pattern is symmetric about x = 10 (NIST StRD Wampler3 data listing minus Wampler1).
WAMPLER_E_HALF = [759, -2048, 2048, -2048, 2523, -2048, 2048, -2048, 1838, -2048, 2048]
WAMPLER_E = np.array(WAMPLER_E_HALF + WAMPLER_E_HALF[-2::-1], dtype=float)
WAMPLER1_Y = sum(WAMPLER_X**k for k in range(6))
# NIST StRD Wampler3 certified standard deviations of the estimates (Wampler4 = 100x, Wampler5 = 10^4x).
WAMPLER3_SE = np.array(
    [2152.32624678170, 2363.55173469681, 779.343524331583, 101.475507550350, 5.64566512170752, 0.112324854679312]
)


def wampler(number: int) -> tuple[FloatArray, FloatArray]:
    """Wampler data sets from their defining formulas (NIST StRD, REFERENCES.md)."""
    if number == 2:
        return WAMPLER_X, sum(0.1**k * WAMPLER_X**k for k in range(6))
    noise = {1: 0.0, 3: 1.0, 4: 100.0, 5: 10000.0}[number]
    return WAMPLER_X, WAMPLER1_Y + noise * WAMPLER_E


def test_wampler_data_match_the_nist_listing() -> None:
    """Spot values of the generated data against the NIST StRD data listings (Wampler2-5, x = 2 and 20)."""
    assert wampler(2)[1][2] == pytest.approx(1.24992)
    assert wampler(3)[1][20] == 3369180.0
    assert wampler(4)[1][1] == -204794.0
    assert wampler(5)[1][0] == 7590001.0


@pytest.mark.parametrize(
    ("number", "certified", "rtol"),
    [
        (1, np.ones(6), 1e-8),
        (2, 0.1 ** np.arange(6), 1e-8),
        (3, np.ones(6), 1e-8),
        (4, np.ones(6), 1e-6),
        (5, np.ones(6), 1e-4),
    ],
)
def test_wampler_certified_coefficients(number: int, certified: FloatArray, rtol: float) -> None:
    """NIST StRD Wampler1-5 certified coefficients, with the rtol REFERENCES.md suggests."""
    fit = fit_polynomial(*wampler(number), degree=5)
    assert_allclose(fit.parameters, certified, rtol=rtol)


def test_wampler_digits_beat_the_suggested_tolerance() -> None:
    """Extended-precision refinement: Wampler4-5 reach ~10 digits, well past the 1e-6 / 1e-4 suggested."""
    for number in (4, 5):
        fit = fit_polynomial(*wampler(number), degree=5)
        assert_allclose(fit.parameters, np.ones(6), rtol=1e-9)


@pytest.mark.parametrize(
    ("number", "residual_sd"), [(3, 2360.14502379268), (4, 236014.502379268), (5, 23601450.2379268)]
)
def test_wampler_certified_residual_sd_and_standard_errors(number: int, residual_sd: float) -> None:
    """NIST StRD Wampler3-5 certified residual SD and standard deviations of the estimates."""
    fit = fit_polynomial(*wampler(number), degree=5)
    assert fit.stats["residual_sd"] == pytest.approx(residual_sd, rel=1e-10)
    assert_allclose(fit.standard_errors, WAMPLER3_SE * {3: 1.0, 4: 100.0, 5: 1e4}[number], rtol=1e-9)
    assert fit.stats["dof"] == 15


def test_wampler1_exact_fit_has_zero_residual() -> None:
    """NIST StRD Wampler1: certified residual SD 0 (exact data; rounding only)."""
    fit = fit_polynomial(*wampler(1), degree=5)
    residual_sd = fit.stats["residual_sd"]
    assert residual_sd is not None
    assert residual_sd < 1e-8
    assert fit.stats["r_squared"] == pytest.approx(1.0, abs=1e-15)


def _norris() -> tuple[FloatArray, FloatArray]:
    data = np.loadtxt(DATA / "Norris.dat", skiprows=60)
    return data[:, 1], data[:, 0]


def test_norris_certified_values() -> None:
    """NIST StRD Norris certified B0, B1, their SDs, residual SD and R^2 (header of Norris.dat)."""
    x, y = _norris()
    fit = fit_polynomial(x, y, degree=1)
    assert x.size == 36
    assert_allclose(fit.parameters, [-0.262323073774029, 1.00211681802045], rtol=1e-12)
    assert_allclose(fit.standard_errors, [0.232818234301152, 0.429796848199937e-03], rtol=1e-12)
    assert fit.stats["residual_sd"] == pytest.approx(0.884796396144373, rel=1e-12)
    assert fit.stats["r_squared"] == pytest.approx(0.999993745883712, rel=1e-13)


def test_pontius_certified_values() -> None:
    """NIST StRD Pontius certified coefficients, SDs, residual SD and R^2 (tests/science/data/Pontius.dat)."""
    data = np.loadtxt(DATA / "Pontius.dat")
    fit = fit_polynomial(data[:, 1], data[:, 0], degree=2)
    certified = [0.673565789473684e-03, 0.732059160401003e-06, -0.316081871345029e-14]
    assert_allclose(fit.parameters, certified, rtol=1e-10)
    assert_allclose(
        fit.standard_errors, [0.107938612033077e-03, 0.157817399981659e-09, 0.486652849992036e-16], rtol=1e-10
    )
    assert fit.stats["residual_sd"] == pytest.approx(0.205177424076185e-03, rel=1e-10)
    assert fit.stats["r_squared"] == pytest.approx(0.999999900178537, rel=1e-13)


@pytest.mark.parametrize("seed", range(5))
def test_matches_numpy_and_scipy_on_random_well_posed_problems(seed: int) -> None:
    """numpy.polynomial.Polynomial.fit and scipy.linalg.lstsq (reference libraries) on random problems."""
    rng = np.random.default_rng(seed)
    degree = int(rng.integers(0, 7))
    x = rng.uniform(-3.0, 5.0, 60)
    y = np.polynomial.polynomial.polyval(x, rng.normal(size=degree + 1)) + rng.normal(0.0, 0.3, x.size)
    fit = fit_polynomial(x, y, degree=degree)
    reference = Polynomial.fit(x, y, degree).convert().coef
    design = np.vander(x, degree + 1, increasing=True)
    solution, residues, _, _ = scipy.linalg.lstsq(design, y)
    assert_allclose(fit.parameters, reference, rtol=1e-9, atol=1e-11)
    assert_allclose(fit.parameters, solution, rtol=1e-9, atol=1e-11)
    covariance = residues / (x.size - degree - 1) * np.linalg.inv(design.T @ design)
    # The classical formula assumes independent errors; the reported covariance is never below it.
    assert fit.independent_covariance is not None
    assert_allclose(fit.independent_covariance, covariance, rtol=1e-7, atol=1e-14)


def test_weighted_fit_matches_scaled_lstsq() -> None:
    """Weighted least squares = ordinary least squares on rows divided by sigma (scipy.linalg.lstsq)."""
    rng = np.random.default_rng(7)
    x = np.linspace(0.0, 10.0, 40)
    sigma = rng.uniform(0.1, 2.0, x.size)
    y = 1.0 + 0.5 * x - 0.05 * x**2 + rng.normal(0.0, 1.0, x.size) * sigma
    design = np.vander(x, 3, increasing=True) / sigma[:, None]
    solution = scipy.linalg.lstsq(design, y / sigma)[0]
    relative = fit_polynomial(x, y, degree=2, sigma=sigma)
    absolute = fit_polynomial(x, y, degree=2, sigma=sigma, absolute_sigma=True)
    assert_allclose(relative.parameters, solution, rtol=1e-10)
    assert absolute.covariance is not None
    assert_allclose(absolute.covariance, np.linalg.inv(design.T @ design), rtol=1e-8)
    chi2 = float(np.sum((design @ solution - y / sigma) ** 2))
    assert relative.stats["reduced_chi_square"] == pytest.approx(chi2 / (x.size - 3), rel=1e-10)
    # The residual SD stays in y units: the plain residuals of the weighted solution.
    plain = y - np.vander(x, 3, increasing=True) @ solution
    assert relative.stats["residual_sd"] == pytest.approx(np.sqrt(plain @ plain / (x.size - 3)), rel=1e-10)


def test_information_criteria_follow_their_formulas() -> None:
    """AICc and BIC from the Gaussian likelihood (Burnham & Anderson 2002, from memory), recomputed here."""
    rng = np.random.default_rng(3)
    x = np.linspace(0.0, 1.0, 25)
    y = np.sin(3 * x) + rng.normal(0.0, 0.05, x.size)
    fit = fit_polynomial(x, y, degree=3)
    rss = float(np.sum((y - Polynomial.fit(x, y, 3)(x)) ** 2))
    n, k = x.size, 5
    aic = n * np.log(rss / n) + 2 * k
    assert fit.stats["aicc"] == pytest.approx(aic + 2 * k * (k + 1) / (n - k - 1), rel=1e-9)
    assert fit.stats["bic"] == pytest.approx(n * np.log(rss / n) + k * np.log(n), rel=1e-9)


def test_cross_validated_rmse_matches_refits_with_numpy() -> None:
    """5-fold CV with folds interleaved by rank of x, recomputed with numpy.polynomial fits per fold."""
    rng = np.random.default_rng(11)
    x = rng.uniform(0.0, 10.0, 53)
    y = 2.0 + 0.3 * x**2 + rng.normal(0.0, 1.0, x.size)
    order = np.argsort(x, kind="stable")
    errors = []
    for start in range(5):
        held = order[start::5]
        keep = np.setdiff1d(np.arange(x.size), held)
        errors.append(y[held] - Polynomial.fit(x[keep], y[keep], 2)(x[held]))
    expected = np.sqrt(np.mean(np.concatenate(errors) ** 2))
    assert fit_polynomial(x, y, degree=2).stats["cv_rmse"] == pytest.approx(expected, rel=1e-9)


def test_conditioning_warning_when_power_basis_loses_digits() -> None:
    """A cubic on x in [10000, 10001]: power coefficients cancel by ~10^12 (computed below)."""
    x = np.linspace(10000.0, 10001.0, 30)
    y = (x - 10000.5) ** 3
    fit = fit_polynomial(x, y, degree=3)
    assert any("lose" in message or "loses" in message for message in fit.warnings)
    # The fitted curve itself stays exact because it is evaluated in the Chebyshev basis.
    assert_allclose(fit.predict(x), y, atol=1e-12)
    quiet = fit_polynomial(np.linspace(-1, 1, 30), np.linspace(-1, 1, 30) ** 3, degree=3)
    assert quiet.warnings == ()


def test_prediction_band_width_tracks_residual_sd() -> None:
    """For many samples the 95 % prediction half-width tends to t(0.975) * s ~ 1.96 s (Student t)."""
    rng = np.random.default_rng(5)
    x = np.linspace(0.0, 10.0, 2000)
    y = 1.0 + 2.0 * x + rng.normal(0.0, 0.5, x.size)
    fit = fit_polynomial(x, y, degree=1)
    band = fit.prediction_band(np.array([2.0, 5.0, 8.0]))
    residual_sd = fit.stats["residual_sd"]
    assert residual_sd is not None
    assert_allclose((band.upper - band.lower) / 2, 1.9612 * residual_sd, rtol=0.01)
    new_samples = 1.0 + 2.0 * x + rng.normal(0.0, 0.5, x.size)
    whole = fit.prediction_band(x)
    inside = np.mean((new_samples >= whole.lower) & (new_samples <= whole.upper))
    assert 0.93 < inside < 0.97


def test_confidence_band_covers_the_true_line_about_95_percent() -> None:
    """Coverage sanity: over 300 simulated data sets the true curve lies in the 95 % band ~95 % of the time."""
    rng = np.random.default_rng(17)
    x = np.linspace(0.0, 1.0, 12)
    truth = 1.0 - x + 0.5 * x**2
    hits = 0
    for _ in range(300):
        fit = fit_polynomial(x, truth + rng.normal(0.0, 0.1, x.size), degree=2)
        band = fit.confidence_band(np.array([0.3]))
        hits += int(band.lower[0] <= 1.0 - 0.3 + 0.5 * 0.09 <= band.upper[0])
    assert 0.91 < hits / 300 < 0.99


def test_band_flags_extrapolation() -> None:
    """Outside the traced range the band says so, with the caution text."""
    fit = fit_polynomial(np.arange(10.0), np.arange(10.0) ** 2 + np.sin(np.arange(10.0)), degree=2)
    band = fit.confidence_band(np.array([-1.0, 5.0, 12.0]))
    assert band.outside_domain.tolist() == [True, False, True]
    assert band.caution is not None
    assert "not measurements" in band.caution
    assert fit.confidence_band(np.array([5.0])).caution is None
    assert fit.outside_domain(np.array([0.0, 9.0, 9.5])).tolist() == [False, False, True]


@settings(max_examples=25, deadline=None)
@given(
    scale=st.floats(min_value=1e-3, max_value=1e3),
    y_scale=st.floats(min_value=1e-3, max_value=1e3),
    seed=st.integers(min_value=0, max_value=1000),
)
def test_rescaling_x_or_y_transforms_the_coefficients(scale: float, y_scale: float, seed: int) -> None:
    """Invariants: y -> s y scales every c_k by s; x -> s x maps c_k to c_k / s^k; R^2 unchanged."""
    rng = np.random.default_rng(seed)
    x = np.linspace(-2.0, 3.0, 30)
    y = 1.0 + x - 0.5 * x**2 + 0.1 * x**3 + rng.normal(0.0, 0.2, x.size)
    base = fit_polynomial(x, y, degree=3)
    scaled_y = fit_polynomial(x, y * y_scale, degree=3)
    scaled_x = fit_polynomial(x * scale, y, degree=3)
    powers = scale ** np.arange(4)
    assert_allclose(np.array(scaled_y.parameters), y_scale * np.array(base.parameters), rtol=1e-9)
    assert_allclose(np.array(scaled_x.parameters) * powers, base.parameters, rtol=1e-8)
    assert_allclose(np.array(scaled_x.standard_errors) * powers, base.standard_errors, rtol=1e-7)
    assert scaled_x.stats["r_squared"] == pytest.approx(base.stats["r_squared"], rel=1e-10)


@pytest.mark.parametrize(
    ("x", "y", "degree", "message"),
    [
        ([0.0, 1.0, 2.0], [1.0, 2.0, 3.0], 2, "at least 4 samples"),
        ([0.0, 0.0, 1.0, 1.0, 1.0], [1.0, 2.0, 3.0, 4.0, 5.0], 2, "3 distinct x"),
        ([0.0, 1.0, float("nan"), 3.0], [1.0, 2.0, 3.0, 4.0], 1, "x contains NaN"),
        ([0.0, 1.0, 2.0, 3.0], [1.0, 2.0, 3.0], 1, "different lengths"),
        (list(range(30)), list(range(30)), 16, "between 0 and 15"),
        (list(range(30)), list(range(30)), 2.5, "whole number"),
    ],
)
def test_bad_input_is_refused_with_a_clear_message(x: list[float], y: list[float], degree: float, message: str) -> None:
    """Bad samples or degree raise ScienceInputError naming the problem."""
    with pytest.raises(ScienceInputError, match=message):
        fit_polynomial(x, y, degree=degree)  # type: ignore[arg-type]


def test_sigma_must_be_positive() -> None:
    """A zero uncertainty would give infinite weight: refused."""
    with pytest.raises(ScienceInputError, match="sigma must be positive"):
        fit_polynomial([0, 1, 2, 3], [1, 2, 3, 5], degree=1, sigma=[1, 0, 1, 1])


def test_clustered_samples_fall_back_to_qr_and_still_fit() -> None:
    """Samples bunched at both ends make the design ill-conditioned (kappa ~ 1e6): fitted values still
    agree with numpy.linalg.lstsq (reference library) to rounding level."""
    rng = np.random.default_rng(0)
    x = np.r_[rng.uniform(0.0, 0.05, 400), rng.uniform(0.95, 1.0, 4)]
    y = np.cos(3 * x) + rng.normal(0.0, 1e-3, x.size)
    fit = fit_polynomial(x, y, degree=9)
    condition = fit.stats["condition_number"]
    assert condition is not None
    assert condition > 1e5
    design = np.polynomial.chebyshev.chebvander(2 * x - 1, 9)
    reference = design @ np.linalg.lstsq(design, y, rcond=None)[0]
    assert_allclose(fit.predict(x), reference, atol=1e-9)
