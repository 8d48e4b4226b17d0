"""Exact interpolation through equally spaced nodes and the exact power-basis conversions.

References: the equal-spacing coefficient table n = 2..5 (Lagrange / Newton forward differences,
Abramowitz & Stegun sec. 25.3, from memory, via REFERENCES.md); barycentric weights from their
definition w_j = 1 / prod_{k != j} (x_j - x_k) (Berrut & Trefethen, SIAM Review 46(3), 2004; from
memory); numpy.polynomial (reference library) for the Chebyshev to power conversion.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.polynomial import Chebyshev, Polynomial
from numpy.testing import assert_allclose

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_interpolation import fit_interpolation
from tracedesk.science.fit_power_basis import chebyshev_to_power, chebyshev_to_power_matrix

VALUES = np.array([1.3, -0.7, 2.9, 4.1, -3.3, 0.6])

# Rows: coefficient c_j as weights on f_0..f_n over a common denominator (REFERENCES.md table).
TABLE = {
    2: {1: ([-3, 4, -1], 2), 2: ([1, -2, 1], 2)},
    3: {1: ([-11, 18, -9, 2], 6), 2: ([2, -5, 4, -1], 2), 3: ([-1, 3, -3, 1], 6)},
    4: {
        1: ([-25, 48, -36, 16, -3], 12),
        2: ([35, -104, 114, -56, 11], 24),
        3: ([-5, 18, -24, 14, -3], 12),
        4: ([1, -4, 6, -4, 1], 24),
    },
    5: {1: ([-137, 300, -300, 200, -75, 12], 60), 5: ([-1, 5, -10, 10, -5, 1], 120)},
}


@pytest.mark.parametrize("n", [2, 3, 4, 5])
def test_equal_spacing_table(n: int) -> None:
    """p(x) through (k, f_k), k = 0..n: the tabulated c_j and c_0 = f_0."""
    values = VALUES[: n + 1]
    fit = fit_interpolation(np.arange(n + 1.0), values)
    assert isinstance(fit.parameters, dict)
    coefficients = fit.parameters["coefficients"]
    assert isinstance(coefficients, list)
    assert coefficients[0] == pytest.approx(values[0], abs=1e-15)
    for j, (weights, denominator) in TABLE[n].items():
        assert coefficients[j] == pytest.approx(np.dot(weights, values) / denominator, rel=1e-14, abs=1e-14)


def test_barycentric_weights_and_exact_nodes() -> None:
    """Weights (-1)^j binom(4, j); the interpolant returns the node values exactly at the nodes."""
    x = np.linspace(2.0, 4.0, 5)
    fit = fit_interpolation(x, VALUES[:5])
    assert isinstance(fit.parameters, dict)
    assert fit.parameters["weights"] == [1.0, -4.0, 6.0, -4.0, 1.0]
    definition = np.array([1.0 / np.prod([xj - xk for xk in x if xk != xj]) for xj in x])
    assert_allclose(definition / definition[0], fit.parameters["weights"], rtol=1e-12)
    assert fit.predict(x).tolist() == VALUES[:5].tolist()
    reference = Polynomial.fit(x, VALUES[:5], 4)
    grid = np.linspace(2.0, 4.0, 17)
    assert_allclose(fit.predict(grid), reference(grid), rtol=1e-12, atol=1e-12)
    assert_allclose(np.polynomial.polynomial.polyval(grid, fit.parameters["coefficients"]), reference(grid), rtol=1e-10)
    assert fit.stats["dof"] == 0
    assert fit.standard_errors == {
        "nodes": [0.0] * 5,
        "values": [0.0] * 5,
        "weights": [0.0] * 5,
        "coefficients": [0.0] * 5,
    }


def test_nodes_read_from_a_trace() -> None:
    """With a degree, node values are read from the trace by linear interpolation (and it says so)."""
    x = np.linspace(0.0, 1.0, 101)
    fit = fit_interpolation(x, x**2, degree=2)
    assert isinstance(fit.parameters, dict)
    assert_allclose(fit.parameters["values"], [0.0, 0.25, 1.0], atol=1e-12)
    assert_allclose(fit.parameters["coefficients"], [0.0, 0.0, 1.0], atol=1e-12)
    assert any("linear interpolation" in message for message in fit.warnings)


def test_unequal_spacing_is_refused() -> None:
    """Without a degree the samples themselves must be the equally spaced nodes."""
    with pytest.raises(ScienceInputError, match="equally spaced"):
        fit_interpolation([0.0, 1.0, 3.0], [1.0, 2.0, 3.0])
    with pytest.raises(ScienceInputError, match="limited to 16 nodes"):
        fit_interpolation(np.arange(20.0), np.arange(20.0))


@pytest.mark.parametrize("seed", range(4))
def test_chebyshev_to_power_matches_numpy(seed: int) -> None:
    """Exact conversion agrees with numpy.polynomial.Chebyshev(...).convert(kind=Polynomial)."""
    rng = np.random.default_rng(seed)
    degree = int(rng.integers(1, 10))
    coefficients = rng.normal(size=degree + 1)
    low, high = sorted(rng.uniform(-5.0, 5.0, 2))
    centre, half = (low + high) / 2, (high - low) / 2
    reference = Chebyshev(coefficients, domain=[centre - half, centre + half]).convert(kind=Polynomial).coef
    ours = chebyshev_to_power(list(coefficients), centre=centre, half_width=half)
    scale = np.abs(reference).max()
    assert_allclose(ours, reference, rtol=1e-9, atol=1e-12 * scale)
    matrix = chebyshev_to_power_matrix(degree, centre=centre, half_width=half)
    assert_allclose(matrix @ coefficients, reference, rtol=1e-9, atol=1e-12 * scale)
