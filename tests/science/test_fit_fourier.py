"""Fourier series fits against a textbook worked example, the discrete Fourier formulas and numpy.fft.

References: J. Bird, Higher Engineering Mathematics, 6th ed., ch. 70, table 70.1 (via REFERENCES.md);
the equally spaced Fourier coefficient formulas in REFERENCES.md; numpy.fft.rfft (reference library).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_fourier import fit_fourier


def _coefficients(parameters: object, degree: int) -> np.ndarray:
    assert isinstance(parameters, dict)
    names = ["a0"] + [f"{p}{k}" for k in range(1, degree + 1) for p in ("a", "b")]
    return np.array([parameters[name] for name in names])


def test_bird_table_70_1_worked_example() -> None:
    """Bird, Higher Engineering Mathematics, table 70.1: 12 samples over 360 deg; book rounds to ~0.02."""
    theta = np.arange(30.0, 361.0, 30.0)
    voltage = [62, 35, -38, -64, -63, -52, -28, 24, 80, 96, 90, 70]
    fit = fit_fourier(theta, voltage, degree=3, period=360.0)
    book = [17.667, 69.657, -46.423, -6.5, 4.907, -8.167, 9.167]  # a0, a1, b1, a2, b2, a3, b3
    assert_allclose(_coefficients(fit.parameters, 3), book, atol=0.02)
    assert isinstance(fit.parameters, dict)
    assert fit.parameters["period"] == 360.0


def test_three_and_four_point_formulas() -> None:
    """Equally spaced samples x_k = 2 pi k / N: N=3 and N=4 closed forms from REFERENCES.md."""
    y3 = np.array([2.0, -1.0, 5.0])
    x3 = 2 * math.pi * np.arange(3) / 3
    fit3 = fit_fourier(np.r_[x3, x3 + 2 * math.pi], np.r_[y3, y3], degree=1, period=2 * math.pi)
    assert_allclose(
        _coefficients(fit3.parameters, 1),
        [y3.mean(), (2 * y3[0] - y3[1] - y3[2]) / 3, (y3[1] - y3[2]) / math.sqrt(3)],
        atol=1e-12,
    )
    y4 = np.array([1.0, 4.0, -2.0, 3.0, 1.0, 4.0, -2.0, 3.0])
    x4 = 2 * math.pi * np.arange(8) / 4
    fit4 = fit_fourier(x4, y4, degree=1, period=2 * math.pi)
    assert_allclose(
        _coefficients(fit4.parameters, 1), [y4[:4].mean(), (y4[0] - y4[2]) / 2, (y4[1] - y4[3]) / 2], atol=1e-12
    )


def test_matches_numpy_rfft_on_a_full_period() -> None:
    """Least squares on N equally spaced samples over one period = DFT: a_m = 2 Re X_m / N, b_m = -2 Im X_m / N."""
    rng = np.random.default_rng(4)
    n = 32
    y = rng.normal(size=n)
    spectrum = np.fft.rfft(y)
    fit = fit_fourier(np.arange(n, dtype=float), y, degree=6, period=float(n))
    expected = [spectrum[0].real / n]
    for m in range(1, 7):
        expected += [2 * spectrum[m].real / n, -2 * spectrum[m].imag / n]
    assert_allclose(_coefficients(fit.parameters, 6), expected, atol=1e-12)


def test_known_period_has_zero_period_uncertainty() -> None:
    """A given period is exact: its standard error and covariance row are zero."""
    x = np.linspace(0.0, 48.0, 97)
    y = 10.0 + 3.0 * np.cos(2 * np.pi * x / 24) + np.random.default_rng(1).normal(0.0, 0.2, x.size)
    fit = fit_fourier(x, y, degree=1, period=24.0)
    assert isinstance(fit.standard_errors, dict)
    assert fit.standard_errors["period"] == 0.0
    assert fit.covariance is not None
    assert_allclose(fit.covariance[-1], 0.0)
    assert fit.stats["dof"] == x.size - 3


def test_estimates_an_unknown_period() -> None:
    """Synthetic skewed daily cycle, period 23.7 h, 7 days: the estimate is within a few standard errors."""
    rng = np.random.default_rng(2)
    x = np.sort(rng.uniform(0.0, 24.0 * 7, 1500))
    y = 10 + 3 * np.cos(2 * np.pi * x / 23.7) + 1.5 * np.sin(4 * np.pi * x / 23.7) + rng.normal(0, 0.5, x.size)
    fit = fit_fourier(x, y, degree=2)
    assert isinstance(fit.parameters, dict)
    assert isinstance(fit.standard_errors, dict)
    period, error = fit.parameters["period"], fit.standard_errors["period"]
    assert 0.0 < error < 0.05
    assert abs(period - 23.7) < 4 * error
    assert fit.stats["dof"] == x.size - 6
    assert_allclose(_coefficients(fit.parameters, 2), [10, 3, 0, 0, 1.5], atol=0.1)
    band = fit.confidence_band(np.array([50.0]))
    assert band.upper[0] > band.lower[0]


def test_period_search_respects_bounds() -> None:
    """A signal with periods 5 and 50: the bounds select which one is found."""
    x = np.linspace(0.0, 200.0, 2001)
    y = np.sin(2 * np.pi * x / 5) + 2 * np.sin(2 * np.pi * x / 50)
    default = fit_fourier(x, y, degree=1)
    assert isinstance(default.parameters, dict)
    # The unmodelled 5-unit cycle leaks into the least-squares optimum slightly (RSS minimum at 50.1).
    assert default.parameters["period"] == pytest.approx(50.0, rel=5e-3)
    short = fit_fourier(x, y, degree=1, period_bounds=(3.0, 8.0))
    assert isinstance(short.parameters, dict)
    assert short.parameters["period"] == pytest.approx(5.0, rel=1e-3)


def test_partial_period_warns() -> None:
    """Samples spanning less than one period: the coefficients are poorly determined; say so."""
    x = np.linspace(0.0, 10.0, 30)
    fit = fit_fourier(x, np.cos(2 * np.pi * x / 24), degree=1, period=24.0)
    assert any("one period" in message for message in fit.warnings)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"degree": 1, "period": -5.0}, "period must be positive"),
        ({"degree": 1, "period": 0.0}, "period must be positive"),
        ({"degree": 3, "period": 24.0}, "at least 8 samples"),
        ({"degree": 1, "period_bounds": (5.0, 2.0)}, "cannot search"),
        ({"degree": 0}, "degree of at least 1"),
        ({"degree": 1, "period": 3.0, "period_bounds": (2.0, 4.0)}, "not both"),
    ],
)
def test_bad_options_are_refused(kwargs: dict[str, object], message: str) -> None:
    """Non-positive period, too few samples, empty search range, period estimation without harmonics."""
    x = np.arange(6.0)
    with pytest.raises(ScienceInputError, match=message):
        fit_fourier(x, np.sin(x), **kwargs)  # type: ignore[arg-type]
