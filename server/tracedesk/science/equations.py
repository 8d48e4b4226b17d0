"""Printing a fitted model as an equation: plain text, LaTeX, a Python expression, a spreadsheet formula.

Coefficients are rounded to the digits their standard errors support plus one guard digit: the
last printed digit sits one place below the first significant digit of the standard error. Exact
fits (standard error zero: interpolation, a known period, noiseless data) keep 15 significant
digits. Because coefficients of the power basis can be strongly correlated, rounding each to its
own standard error can still move the curve more than its uncertainty; so the printed Python
expression is evaluated over the traced range and more guard digits are added until it stays within
a tenth of the 95 % confidence half-width of the fitted curve.

:func:`evaluate_python_expression` evaluates a printed expression safely (only numbers, ``x``,
``pi``, ``+ - * / **`` and ``exp, log, cos, sin, sqrt``), so anyone can check the round trip.
"""

from __future__ import annotations

import ast
import math
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Final

import numpy as np
from numpy.typing import ArrayLike

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_inputs import FloatArray
from tracedesk.science.fit_result import FitResult

FULL_PRECISION_DIGITS: Final = 15
MAX_DIGITS: Final = 17
MINIMUM_DIGITS: Final = 2
GUARD_DIGITS: Final = 1
# The printed curve may differ from the fitted one by at most this fraction of the 95 % half-width.
BAND_FRACTION: Final = 0.1
MAX_EXPRESSION_LENGTH: Final = 20_000
_CELL_PATTERN: Final = re.compile(r"\$?[A-Z]{1,3}\$?[1-9][0-9]{0,6}")


@dataclass(frozen=True)
class Equation:
    """A fitted model written out four ways, and the rounded values printed."""

    plain: str
    latex: str
    python: str
    spreadsheet: str
    printed_parameters: dict[str, float]
    significant_digits: dict[str, int]


def significant_digits(value: float, standard_error: float, *, guard_digits: int = GUARD_DIGITS) -> int:
    """Significant digits of ``value`` worth printing given its ``standard_error`` (same units).

    Keeps digits down to the first significant digit of the standard error, plus ``guard_digits``;
    15 for an exact value (zero or non-finite standard error); at least 2 and at most 17.
    """
    if value == 0.0 or not math.isfinite(value):
        return MINIMUM_DIGITS
    if standard_error == 0.0 or not math.isfinite(standard_error):
        return FULL_PRECISION_DIGITS
    digits = math.floor(math.log10(abs(value))) - math.floor(math.log10(standard_error)) + 1 + guard_digits
    return max(MINIMUM_DIGITS, min(MAX_DIGITS, digits))


def round_significant(value: float, digits: int) -> float:
    """``value`` rounded to ``digits`` significant decimal digits."""
    return float(f"{value:.{digits}g}")


def write_equation(fit: FitResult, *, cell: str = "A2") -> Equation:
    """Write ``fit`` as plain text, LaTeX, a Python expression in ``x`` and a spreadsheet formula.

    Parameters
    ----------
    fit : FitResult
        Any family except ``"spline"`` (which has no closed form: export its knots instead).
    cell : str
        Spreadsheet cell holding ``x``, e.g. ``"A2"`` or ``"$B$7"``.
    """
    if not _CELL_PATTERN.fullmatch(cell):
        raise ScienceInputError(f"cell must be a spreadsheet reference such as A2 or $B$7, got {cell!r}")
    if fit.family not in _WRITERS:
        raise ScienceInputError(
            f"a {fit.family} fit has no closed-form equation; export its knots and coefficients instead"
        )
    values, errors = _named_values(fit)
    for guard in range(GUARD_DIGITS, MAX_DIGITS + 1):
        digits = {name: significant_digits(values[name], errors[name], guard_digits=guard) for name in values}
        equation = _render(fit.family, values, digits, cell)
        if guard >= MAX_DIGITS or _reproduces_fit(fit, equation.python):
            return equation
    raise AssertionError("unreachable: the guard loop always returns")  # pragma: no cover


def _named_values(fit: FitResult) -> tuple[dict[str, float], dict[str, float]]:
    """Printable parameters by name (power-basis coefficients as c0, c1, ...) and their standard errors."""
    if fit.family in ("polynomial", "interpolation"):
        values = fit.parameters if isinstance(fit.parameters, list) else fit.parameters["coefficients"]
        errors = fit.standard_errors if isinstance(fit.standard_errors, list) else fit.standard_errors["coefficients"]
        assert isinstance(values, list)
        assert isinstance(errors, list)
        return ({f"c{k}": float(v) for k, v in enumerate(values)}, {f"c{k}": float(e) for k, e in enumerate(errors)})
    assert isinstance(fit.parameters, dict)
    assert isinstance(fit.standard_errors, dict)
    return (
        {name: float(value) for name, value in fit.parameters.items() if isinstance(value, float | int)},
        {name: float(value) for name, value in fit.standard_errors.items() if isinstance(value, float | int)},
    )


def _reproduces_fit(fit: FitResult, expression: str) -> bool:
    """True when the printed expression stays within BAND_FRACTION of the confidence half-width."""
    if all(error == 0.0 for error in _named_values(fit)[1].values()):
        return True
    grid = np.linspace(fit.domain[0], fit.domain[1], 201)
    try:
        band = fit.confidence_band(grid)
    except ScienceInputError:
        return True
    half_width = (band.upper - band.lower) / 2.0
    printed = evaluate_python_expression(expression, grid)
    tolerance = BAND_FRACTION * float(np.min(half_width))
    return bool(np.max(np.abs(printed - band.fitted)) <= tolerance)


# --- number and term formatting ---------------------------------------------------------------------


def _number(value: float, digits: int) -> str:
    """Shortest decimal text of ``value`` at ``digits`` significant digits (Python syntax)."""
    text = f"{value:.{digits}g}"
    if "e" in text:
        mantissa, exponent = text.split("e")
        text = f"{mantissa}e{int(exponent)}"
    return text


def _latex_number(text: str) -> str:
    if "e" not in text:
        return text
    mantissa, exponent = text.split("e")
    return f"{mantissa} \\times 10^{{{int(exponent)}}}"


@dataclass(frozen=True)
class _Term:
    """``coefficient * factor`` in each output syntax; an empty factor means a constant term."""

    coefficient: float
    text: str  # the coefficient, unsigned
    plain: str
    latex: str
    python: str
    spreadsheet: str


def _join(terms: list[_Term], style: str) -> str:
    pieces: list[str] = []
    for index, term in enumerate(terms):
        factor = getattr(term, style)
        number = term.text if style != "latex" else _latex_number(term.text)
        if style == "spreadsheet":
            number = number.upper()
        joiner = {"plain": "*", "python": "*", "spreadsheet": "*", "latex": r"\,"}[style]
        body = f"{number}{joiner}{factor}" if factor else number
        sign = "-" if term.coefficient < 0 else "+"
        spaced = style != "spreadsheet"
        if index == 0:
            pieces.append(("-" if sign == "-" else "") + body)
        else:
            pieces.append(f" {sign} {body}" if spaced else f"{sign}{body}")
    return "".join(pieces) if pieces else "0"


def _term(value: float, digits: int, *, plain: str, latex: str, python: str, spreadsheet: str) -> _Term:
    rounded = round_significant(value, digits)
    return _Term(rounded, _number(abs(rounded), digits), plain, latex, python, spreadsheet)


def _polynomial_terms(values: Mapping[str, float], digits: Mapping[str, int], cell: str) -> list[_Term]:
    terms: list[_Term] = []
    for k in range(len(values)):
        name = f"c{k}"
        if round_significant(values[name], digits[name]) == 0.0:
            continue
        power = {0: ("", "", "", ""), 1: ("x", "x", "x", cell)}.get(
            k, (f"x^{k}", f"x^{{{k}}}", f"x**{k}", f"{cell}^{k}")
        )
        terms.append(
            _term(values[name], digits[name], plain=power[0], latex=power[1], python=power[2], spreadsheet=power[3])
        )
    return terms


def _fourier_terms(values: Mapping[str, float], digits: Mapping[str, int], cell: str) -> list[_Term]:
    period = _number(round_significant(values["period"], digits["period"]), digits["period"])
    terms = [_term(values["a0"], digits["a0"], plain="", latex="", python="", spreadsheet="")]
    for k in range(1, (len(values) - 2) // 2 + 1):
        multiple = "2" if k == 1 else str(2 * k)
        argument = f"{multiple}*pi*x/{period}"
        sheet_argument = f"{multiple}*PI()*{cell}/{period.upper()}"
        latex_argument = rf"\frac{{{multiple}\pi x}}{{{_latex_number(period)}}}"
        for name, function in ((f"a{k}", "cos"), (f"b{k}", "sin")):
            if round_significant(values[name], digits[name]) == 0.0:
                continue
            terms.append(
                _term(
                    values[name],
                    digits[name],
                    plain=f"{function}({argument})",
                    latex=rf"\{function}\left({latex_argument}\right)",
                    python=f"{function}({argument})",
                    spreadsheet=f"{function.upper()}({sheet_argument})",
                )
            )
    return terms


def _growth_terms(values: Mapping[str, float], digits: Mapping[str, int], cell: str, *, power: bool) -> list[_Term]:
    exponent = _number(round_significant(values["b"], digits["b"]), digits["b"])
    if power:
        wrapped = f"({exponent})" if exponent.startswith("-") else exponent
        factor = (f"x^{wrapped}", f"x^{{{_latex_number(exponent)}}}", f"x**{wrapped}", f"{cell}^{wrapped.upper()}")
    else:
        factor = (
            f"exp({exponent}*x)",
            f"e^{{{_latex_number(exponent)}\\,x}}",
            f"exp({exponent}*x)",
            f"EXP({exponent.upper()}*{cell})",
        )
    return [
        _term(values["a"], digits["a"], plain=factor[0], latex=factor[1], python=factor[2], spreadsheet=factor[3]),
        _term(values["c"], digits["c"], plain="", latex="", python="", spreadsheet=""),
    ]


def _logarithmic_terms(values: Mapping[str, float], digits: Mapping[str, int], cell: str) -> list[_Term]:
    return [
        _term(values["a"], digits["a"], plain="", latex="", python="", spreadsheet=""),
        _term(values["b"], digits["b"], plain="ln(x)", latex=r"\ln x", python="log(x)", spreadsheet=f"LN({cell})"),
    ]


_TermWriter = Callable[[Mapping[str, float], Mapping[str, int], str], list[_Term]]
_WRITERS: Final[dict[str, _TermWriter]] = {
    "polynomial": _polynomial_terms,
    "interpolation": _polynomial_terms,
    "fourier": _fourier_terms,
    "exponential": lambda v, d, c: _growth_terms(v, d, c, power=False),
    "power": lambda v, d, c: _growth_terms(v, d, c, power=True),
    "logarithmic": _logarithmic_terms,
}


def _render(family: str, values: Mapping[str, float], digits: Mapping[str, int], cell: str) -> Equation:
    terms = [term for term in _WRITERS[family](values, digits, cell) if term.coefficient != 0.0]
    return Equation(
        plain="y = " + _join(terms, "plain"),
        latex="y = " + _join(terms, "latex"),
        python=_join(terms, "python"),
        spreadsheet="=" + _join(terms, "spreadsheet"),
        printed_parameters={name: round_significant(values[name], digits[name]) for name in values},
        significant_digits=dict(digits),
    )


# --- safe evaluation of printed Python expressions --------------------------------------------------

_FUNCTIONS: Final[dict[str, Callable[[FloatArray], FloatArray]]] = {
    "exp": np.exp,
    "log": np.log,
    "cos": np.cos,
    "sin": np.sin,
    "sqrt": np.sqrt,
}
_BINARY: Final[dict[type[ast.operator], Callable[[FloatArray, FloatArray], FloatArray]]] = {
    ast.Add: np.add,
    ast.Sub: np.subtract,
    ast.Mult: np.multiply,
    ast.Div: np.divide,
    ast.Pow: np.power,
}


def evaluate_python_expression(expression: str, x: ArrayLike) -> FloatArray:
    """Evaluate a printed model expression at ``x``, allowing nothing but arithmetic.

    Accepted: numbers, the names ``x`` and ``pi``, ``+ - * / **`` (and unary ``+``/``-``), and calls
    of ``exp, log, cos, sin, sqrt`` with one argument. Anything else raises
    :class:`ScienceInputError`; so does text longer than 20 000 characters or nested too deeply.
    Overflow and invalid operations give ``inf``/``NaN`` as in NumPy.
    """
    if not isinstance(expression, str) or len(expression) > MAX_EXPRESSION_LENGTH:
        raise ScienceInputError("the expression must be text of at most 20000 characters")
    try:
        tree = ast.parse(expression, mode="eval")
    except (SyntaxError, RecursionError, MemoryError, ValueError) as error:
        raise ScienceInputError(f"the expression is not valid: {error}") from error
    values = np.asarray(x, dtype=np.float64)
    try:
        with np.errstate(all="ignore"):
            result = _evaluate_node(tree.body, values)
    except RecursionError as error:
        raise ScienceInputError("the expression is nested too deeply") from error
    return np.broadcast_to(result, values.shape).astype(np.float64)


def _evaluate_node(node: ast.AST, x: FloatArray) -> FloatArray:
    if isinstance(node, ast.Constant) and isinstance(node.value, int | float) and not isinstance(node.value, bool):
        return np.asarray(float(node.value))
    if isinstance(node, ast.Name) and node.id in ("x", "pi"):
        return x if node.id == "x" else np.asarray(math.pi)
    if isinstance(node, ast.BinOp) and type(node.op) in _BINARY:
        return _BINARY[type(node.op)](_evaluate_node(node.left, x), _evaluate_node(node.right, x))
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub | ast.UAdd):
        operand = _evaluate_node(node.operand, x)
        return np.negative(operand) if isinstance(node.op, ast.USub) else operand
    if (
        isinstance(node, ast.Call)
        and isinstance(node.func, ast.Name)
        and node.func.id in _FUNCTIONS
        and len(node.args) == 1
        and not node.keywords
    ):
        return _FUNCTIONS[node.func.id](_evaluate_node(node.args[0], x))
    raise ScienceInputError(f"the expression may not contain {ast.dump(node)[:60]!r}")
