"""Exact conversion of polynomials to power-basis coefficients of the original ``x``.

Polynomials are solved and evaluated in well-conditioned forms: a Chebyshev series in
``t = (x - centre) / half_width`` for least squares, or node values on equally spaced nodes for exact
interpolation. People and spreadsheets want ``c0 + c1 x + ... + cn x^n`` instead. The conversion is
done in exact rational arithmetic (:class:`fractions.Fraction` of the binary floating-point values),
so it adds no rounding of its own; the only rounding is the final one to float64. What it cannot
remove is the sensitivity of the power form itself, measured by :func:`power_basis_digits_lost`.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from fractions import Fraction
from functools import cache

import numpy as np

from tracedesk.science.fit_inputs import FloatArray

# Below this many digits lost, the power-basis coefficients reproduce the curve to ~12 digits: no warning.
DIGITS_LOST_WARNING = 4.0


@cache
def chebyshev_power_table(degree: int) -> tuple[tuple[int, ...], ...]:
    """Integer power coefficients of ``T_0 .. T_degree``: row k lists the coefficients of ``T_k(t)``."""
    rows: list[list[int]] = [[1], [0, 1]]
    for k in range(2, degree + 1):
        doubled = [0] + [2 * value for value in rows[k - 1]]
        previous = rows[k - 2] + [0] * (len(doubled) - len(rows[k - 2]))
        rows.append([a - b for a, b in zip(doubled, previous, strict=True)])
    return tuple(tuple(row) for row in rows[: degree + 1])


def exact_fraction(value: float | np.longdouble) -> Fraction:
    """Exact rational value of a float64 or an x87 extended float (as the sum of two float64)."""
    high = float(value)
    low = float(np.longdouble(value) - np.longdouble(high))
    return Fraction(high) + Fraction(low)


def shift_scale_to_power(coefficients_t: Sequence[Fraction], *, centre: float, half_width: float) -> list[Fraction]:
    """Power coefficients in ``x`` of ``sum a_j t^j`` with ``t = (x - centre) / half_width`` (exact)."""
    m = Fraction(centre)
    h = Fraction(half_width)
    result = [Fraction(0)] * len(coefficients_t)
    for j, a_j in enumerate(coefficients_t):
        if a_j == 0:
            continue
        scaled = a_j / h**j
        for i in range(j + 1):
            result[i] += scaled * math.comb(j, i) * (-m) ** (j - i)
    return result


def chebyshev_to_power(
    coefficients: Sequence[float | np.longdouble], *, centre: float, half_width: float
) -> FloatArray:
    """Power-basis coefficients ``c0..cn`` in ``x`` of a Chebyshev series in ``(x - centre) / half_width``.

    Parameters
    ----------
    coefficients : sequence of float or longdouble
        Chebyshev coefficients ``a_0 .. a_n``.
    centre, half_width : float
        The affine map of the fit's domain onto ``[-1, 1]`` (``x`` units).
    """
    degree = len(coefficients) - 1
    table = chebyshev_power_table(degree)
    exact = [exact_fraction(value) for value in coefficients]
    in_t = [Fraction(0)] * (degree + 1)
    for k, a_k in enumerate(exact):
        for j, integer in enumerate(table[k]):
            if integer:
                in_t[j] += a_k * integer
    in_x = shift_scale_to_power(in_t, centre=centre, half_width=half_width)
    return np.array([float(value) for value in in_x])


def chebyshev_to_power_matrix(degree: int, *, centre: float, half_width: float) -> FloatArray:
    """Matrix ``M`` with ``power_coefficients = M @ chebyshev_coefficients`` (float64).

    Used to carry the covariance into the power basis (``M C M^T``); the Chebyshev table is exact in
    float64 up to degree 15, so each entry has at most a few roundings.
    """
    table = np.zeros((degree + 1, degree + 1))
    for k, row in enumerate(chebyshev_power_table(degree)):
        table[: len(row), k] = row
    substitution = np.zeros((degree + 1, degree + 1))
    for j in range(degree + 1):
        for i in range(j + 1):
            substitution[i, j] = math.comb(j, i) * (-centre) ** (j - i) / half_width**j
    matrix: FloatArray = substitution @ table
    return matrix


def newton_forward_to_power(values: Sequence[float], *, start: float, step: float) -> FloatArray:
    """Power coefficients of the polynomial through ``(start + k * step, values[k])``, k = 0..n (exact).

    Uses Newton's forward-difference form ``p = sum_k Delta^k f_0 * binom(s, k)`` with
    ``s = (x - start) / step`` (Abramowitz & Stegun, sec. 25.2; from memory).
    """
    differences = [Fraction(value) for value in values]
    in_s = [Fraction(0)] * len(differences)
    falling = [Fraction(1)]  # coefficients of s (s-1) ... (s-k+1) / k!
    for k in range(len(differences)):
        for j, coefficient in enumerate(falling):
            in_s[j] += differences[0] * coefficient
        differences = [b - a for a, b in itertools.pairwise(differences)]
        falling = [
            ((falling[j - 1] if j > 0 else Fraction(0)) - k * (falling[j] if j < len(falling) else Fraction(0)))
            / (k + 1)
            for j in range(len(falling) + 1)
        ]
    in_x = shift_scale_to_power(in_s, centre=start, half_width=step)
    return np.array([float(value) for value in in_x])


def power_basis_digits_lost(coefficients: FloatArray, *, domain: tuple[float, float]) -> float:
    """Decimal digits lost to cancellation when the power form is evaluated over ``domain``.

    ``log10(max_x sum_i |c_i x^i| / max_x |p(x)|)`` on 257 points of the domain: the factor by which
    rounding of the printed coefficients is amplified relative to the size of the curve.
    """
    grid = np.linspace(domain[0], domain[1], 257)
    terms = np.abs(coefficients[None, :] * grid[:, None] ** np.arange(coefficients.size)[None, :])
    curve = np.abs(np.polynomial.polynomial.polyval(grid, coefficients))
    largest = float(curve.max())
    if largest == 0.0:
        return 0.0
    return max(0.0, math.log10(float(terms.sum(axis=1).max()) / largest))
