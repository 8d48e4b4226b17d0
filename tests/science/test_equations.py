"""Printed equations: rounding to the supported digits, and the printed Python expression round trip.

References: the fitted models themselves (the printed expression, evaluated independently, must
reproduce FitResult.predict to the stated precision); the equal-spacing table of REFERENCES.md for an
exact fit printed with 15 significant digits.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tracedesk.science.equations import (
    BAND_FRACTION,
    evaluate_python_expression,
    round_significant,
    significant_digits,
    write_equation,
)
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_result import FitResult
from tracedesk.science.fitting import fit_model

RNG = np.random.default_rng(31)
X = np.linspace(1.0, 10.0, 80)
NOISE = RNG.normal(0.0, 0.02, X.size)
CASES = [
    ("polynomial", {"degree": 3}, 1.0 - 2.0 * X + 0.3 * X**2 - 0.01 * X**3 + NOISE),
    ("fourier", {"degree": 2, "period": 4.0}, 2.0 + np.cos(np.pi * X / 2) - 0.3 * np.sin(np.pi * X) + NOISE),
    ("fourier", {"degree": 1}, 2.0 + np.cos(2 * np.pi * X / 3.7) + NOISE),
    ("exponential", {}, 2.5 * np.exp(-0.4 * X) - 1.0 + NOISE),
    ("power", {}, 0.7 * X**1.3 + 2.0 + NOISE),
    ("logarithmic", {}, -1.0 + 2.0 * np.log(X) + NOISE),
]


def _fit(family: str, options: dict[str, object], y: np.ndarray) -> FitResult:
    return fit_model(X, y, family=family, **options)


@pytest.mark.parametrize(("family", "options", "y"), CASES)
def test_printed_python_reproduces_the_fit(family: str, options: dict[str, object], y: np.ndarray) -> None:
    """Evaluating the printed expression stays within a tenth of the 95 % confidence half-width."""
    fit = _fit(family, options, y)
    equation = write_equation(fit)
    grid = np.linspace(1.0, 10.0, 101)
    band = fit.confidence_band(grid)
    printed = evaluate_python_expression(equation.python, grid)
    assert np.max(np.abs(printed - fit.predict(grid))) <= BAND_FRACTION * np.min((band.upper - band.lower) / 2)


@pytest.mark.parametrize(("family", "options", "y"), CASES)
def test_formats_agree_with_each_other(family: str, options: dict[str, object], y: np.ndarray) -> None:
    """Plain text and spreadsheet formula carry the same numbers as the Python expression."""
    equation = write_equation(_fit(family, options, y), cell="$B$7")
    assert equation.plain.startswith("y = ")
    assert equation.latex.startswith("y = ")
    assert equation.spreadsheet.startswith("=")
    assert "$B$7" in equation.spreadsheet
    assert "x" not in equation.spreadsheet.replace("EXP", "")
    translated = (
        equation.spreadsheet[1:]
        .replace("$B$7", "x")
        .replace("^", "**")
        .replace("PI()", "pi")
        .replace("EXP", "exp")
        .replace("LN", "log")
        .replace("COS", "cos")
        .replace("SIN", "sin")
        .replace("E", "e")
    )
    assert_allclose(
        evaluate_python_expression(translated, X), evaluate_python_expression(equation.python, X), rtol=1e-13
    )


def test_rounding_follows_the_standard_error() -> None:
    """Digits down to the standard error's first significant digit, plus one guard digit."""
    assert significant_digits(1.23456, 0.012) == 4  # 1.235 (+-0.012)
    assert significant_digits(123456.0, 37.0) == 6  # 123456 (+-37): tens place + guard = units
    assert significant_digits(0.000123456, 2e-7) == 5  # 0.00012346
    assert significant_digits(2.5, 0.0) == 15  # exact
    assert significant_digits(0.003, 0.5) == 2  # at least two digits of an undetermined value
    assert round_significant(1.23456, 4) == 1.235


def test_exact_fit_keeps_full_precision() -> None:
    """Interpolation through the REFERENCES.md n=3 table: c1 = -14/6 printed to 15 digits."""
    fit = fit_model([0.0, 1.0, 2.0, 3.0], [1.0, 2.0, 5.0, 3.0], family="interpolation")
    equation = write_equation(fit)
    assert equation.python == "1 - 2.33333333333333*x + 4.5*x**2 - 1.16666666666667*x**3"
    assert equation.significant_digits["c1"] == 15


def test_correlated_power_coefficients_get_more_digits() -> None:
    """x near 1000: rounding each coefficient to its own SE would move the curve; more digits are kept."""
    rng = np.random.default_rng(2)
    x = np.linspace(1000.0, 1010.0, 40)
    fit = fit_model(
        x, 3 + 0.5 * (x - 1005) + 0.02 * (x - 1005) ** 2 + rng.normal(0, 0.01, x.size), family="polynomial", degree=2
    )
    equation = write_equation(fit)
    assert isinstance(fit.standard_errors, list)
    naive = significant_digits(float(fit.parameters[0]), fit.standard_errors[0])  # type: ignore[index, arg-type]
    assert equation.significant_digits["c0"] > naive
    band = fit.confidence_band(x)
    assert np.max(np.abs(evaluate_python_expression(equation.python, x) - band.fitted)) <= BAND_FRACTION * np.min(
        (band.upper - band.lower) / 2
    )


def test_latex_and_spreadsheet_shapes() -> None:
    """Our own notation: scientific numbers as 'a \\times 10^{k}', spreadsheet exponents in caps."""
    fit = fit_model(X, 1e-5 * X**2 + 3.0 + NOISE * 1e-6, family="polynomial", degree=2)
    equation = write_equation(fit, cell="C3")
    assert r"\times 10^{-5}" in equation.latex
    assert "E-5*C3^2" in equation.spreadsheet or "E-05*C3^2" in equation.spreadsheet
    assert "x**2" in equation.python


def test_spline_has_no_closed_form_and_cells_are_checked() -> None:
    """A spline cannot be printed as one formula; a bad cell reference is refused."""
    spline = fit_model(X, np.sin(X), family="spline")
    with pytest.raises(ScienceInputError, match="no closed-form"):
        write_equation(spline)
    with pytest.raises(ScienceInputError, match="cell must be"):
        write_equation(_fit(*CASES[0]), cell="A2;DROP")


def test_evaluator_accepts_arithmetic_only() -> None:
    """Numbers, x, pi, + - * / ** and exp/log/cos/sin/sqrt; nothing else."""
    x = np.array([1.0, 2.0])
    assert_allclose(
        evaluate_python_expression("2*x**2 - exp(0) + sqrt(4)*cos(pi) + log(x) - -x", x),
        2 * x**2 - 1 - 2 + np.log(x) + x,
    )
    assert_allclose(evaluate_python_expression("3", x), [3.0, 3.0])
    assert math.isinf(float(evaluate_python_expression("9.0**9**9", x)[0]))
    for hostile in (
        "__import__('os').system('true')",
        "x.real",
        "abs(x)",
        "[x]",
        "x if x else 1",
        "y + 1",
        "exp(x, 2)",
        "'a' * 3",
        "True + x",
        "lambda: 1",
    ):
        with pytest.raises(ScienceInputError):
            evaluate_python_expression(hostile, x)
    with pytest.raises(ScienceInputError):
        evaluate_python_expression("(" * 500 + "x" + ")" * 500, x)
    with pytest.raises(ScienceInputError):
        evaluate_python_expression("x+" * 20000 + "x", x)
