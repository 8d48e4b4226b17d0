"""Exact polynomial interpolation through ``n + 1`` equally spaced nodes.

The polynomial is held in barycentric form: with nodes ``x_j = x_0 + j h`` the barycentric weights
are ``w_j = (-1)^j binom(n, j)`` (any common factor cancels), and
``p(x) = sum_j w_j f_j / (x - x_j) / sum_j w_j / (x - x_j)``, which evaluates stably and returns the
node values exactly at the nodes (Berrut & Trefethen, "Barycentric Lagrange interpolation",
SIAM Review 46(3), 2004; from memory). Power-basis coefficients come from Newton's forward differences
in exact rational arithmetic (:func:`tracedesk.science.fit_power_basis.newton_forward_to_power`).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Final

import numpy as np
from numpy.typing import ArrayLike, NDArray

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_inputs import (
    DuplicateGroups,
    FloatArray,
    check_degree,
    check_samples,
    merge_duplicate_x,
)
from tracedesk.science.fit_polynomial import MAX_POLYNOMIAL_DEGREE, polynomial_warnings
from tracedesk.science.fit_power_basis import newton_forward_to_power
from tracedesk.science.fit_result import FitResult
from tracedesk.science.fit_stats import STAT_NAMES, StatsDict

# Steps may differ by this fraction of the mean step and still count as equal (rounded x of a trace).
SPACING_TOLERANCE: Final = 1e-9
# Equally spaced interpolation of higher degree oscillates near the ends (Runge's phenomenon).
RUNGE_DEGREE: Final = 8


def equispaced_barycentric_weights(degree: int) -> FloatArray:
    """Barycentric weights ``(-1)^j binom(n, j)`` of ``n + 1`` equally spaced nodes."""
    return np.array([(-1) ** j * math.comb(degree, j) for j in range(degree + 1)], dtype=np.float64)


@dataclass(frozen=True)
class BarycentricModel:
    """Interpolating polynomial through ``(nodes, values)`` with barycentric ``weights``."""

    nodes: FloatArray
    values: FloatArray
    weights: FloatArray
    internal_covariance: FloatArray | None

    def parameter_gradient(self, x: FloatArray) -> FloatArray:
        """Lagrange basis ``l_j(x)``: the derivative of ``p(x)`` with respect to node value ``f_j``."""
        difference = x[:, None] - self.nodes[None, :]
        exact = difference == 0.0
        with np.errstate(divide="ignore", invalid="ignore"):
            terms = self.weights[None, :] / difference
            basis = terms / terms.sum(axis=1, keepdims=True)
        hit = exact.any(axis=1)
        basis[hit] = exact[hit].astype(np.float64)
        result: FloatArray = basis
        return result

    def evaluate(self, x: FloatArray) -> FloatArray:
        """``p(x)`` (``y`` units); the node values exactly at the nodes."""
        values: FloatArray = self.parameter_gradient(x) @ self.values
        return values


def fit_interpolation(
    x: ArrayLike, y: ArrayLike, *, degree: int | None = None, sigma: ArrayLike | None = None
) -> FitResult:
    """Polynomial of degree ``n`` through ``n + 1`` equally spaced nodes.

    Parameters
    ----------
    x, y : array_like
        Either exactly ``n + 1`` samples at equally spaced ``x`` (the nodes), or, with ``degree``
        given, a trace from which the node values are read by linear interpolation.
    degree : int, optional
        ``n`` (0 to 15); default one less than the number of samples.
    sigma : array_like, optional
        Standard uncertainty of each ``y`` (``y`` units). It is not a weight (the curve passes through
        the node values whatever they are): it is carried to the node values and the coefficients,
        whose standard errors are otherwise zero.

    Returns
    -------
    FitResult
        ``parameters`` is ``{"nodes", "values", "weights", "coefficients"}`` (barycentric weights and
        power-basis ``c0..cn``). The internal parameters are the node values; ``parameter_map`` takes
        them to the power-basis coefficients.
    """
    samples = check_samples(x, y, sigma, minimum=1)
    merged = merge_duplicate_x(samples.x, samples.y, samples.weights)
    node_count = (
        merged.x.size
        if degree is None
        else check_degree(degree, family="interpolation", maximum=MAX_POLYNOMIAL_DEGREE) + 1
    )
    if node_count - 1 > MAX_POLYNOMIAL_DEGREE:
        raise ScienceInputError(
            f"exact interpolation is limited to {MAX_POLYNOMIAL_DEGREE + 1} nodes, got {node_count} samples; "
            "give a degree to read fewer nodes from the trace"
        )
    messages: list[str] = []
    if node_count > merged.x.size:
        raise ScienceInputError(f"degree {node_count - 1} needs {node_count} samples, got {merged.x.size}")
    reading = NodeReading.of(merged.x, node_count)
    if node_count == merged.x.size:
        _check_equal_spacing(merged.x)
        values = merged.y
    else:
        values = np.interp(np.linspace(merged.x[0], merged.x[-1], node_count), merged.x, merged.y)
        messages.append("The node values were read from the trace by linear interpolation between samples.")
    covariance = reading.covariance(1.0 / merged.weights if samples.weighted else None)
    result = _interpolation_result(merged.x[0], merged.x[-1], values, covariance, messages)
    # Without sample uncertainties nothing is known about the node values' error: no band.
    return result if samples.weighted else dataclasses.replace(result, covariance_dof=0.0)


@dataclass(frozen=True)
class NodeReading:
    """How node values are read from samples sorted by ``x``: ``(1 - t) y_i + t y_(i+1)`` for each node.

    Attributes
    ----------
    lower : ndarray of intp, shape (nodes,)
        Index ``i`` of the sample at or before each node.
    fraction : ndarray, shape (nodes,)
        ``t`` in ``[0, 1]`` (0 where the node is the sample itself).
    """

    lower: NDArray[np.intp]
    fraction: FloatArray

    @classmethod
    def of(cls, x: FloatArray, node_count: int) -> NodeReading:
        """The reading of ``node_count`` equally spaced nodes from sorted distinct ``x`` (the samples themselves
        when there are as many nodes as samples)."""
        if node_count == x.size:
            return cls(np.arange(x.size), np.zeros(x.size))
        nodes = np.linspace(x[0], x[-1], node_count)
        lower = np.clip(np.searchsorted(x, nodes, side="right") - 1, 0, max(x.size - 2, 0))
        upper = np.minimum(lower + 1, x.size - 1)
        span = x[upper] - x[lower]
        with np.errstate(invalid="ignore", divide="ignore"):
            fraction = np.where(span > 0.0, (nodes - x[lower]) / span, 0.0)
        return cls(lower, np.clip(fraction, 0.0, 1.0))

    def apply(self, values: FloatArray) -> FloatArray:
        """Node values read from ``values`` (shape ``(n,)`` or ``(n, m)``, sorted by ``x``)."""
        upper = np.minimum(self.lower + 1, values.shape[0] - 1)
        t = self.fraction if values.ndim == 1 else self.fraction[:, None]
        read: FloatArray = (1.0 - t) * values[self.lower] + t * values[upper]
        return read

    def covariance(self, sigma: FloatArray | None) -> FloatArray:
        """Covariance of the node values from independent sample uncertainties ``sigma`` (zero without)."""
        size = self.lower.size
        if sigma is None:
            return np.zeros((size, size))
        used = np.unique(np.concatenate([self.lower, np.minimum(self.lower + 1, sigma.size - 1)]))
        local = self.apply_matrix(sigma.size)[:, used]
        result: FloatArray = (local * sigma[used] ** 2) @ local.T
        return result

    def apply_matrix(self, count: int) -> FloatArray:
        """The reading as a dense ``(nodes, count)`` matrix (for a few nodes only)."""
        matrix = np.zeros((self.lower.size, count))
        rows = np.arange(self.lower.size)
        np.add.at(matrix, (rows, self.lower), 1.0 - self.fraction)
        np.add.at(matrix, (rows, np.minimum(self.lower + 1, count - 1)), self.fraction)
        return matrix


def interpolation_response(x: FloatArray, weights: FloatArray, shifts: FloatArray, *, node_count: int) -> FloatArray:
    """Shift of the node values per column of ``shifts`` (sample ``y`` shifts, rows in the order of ``x``).

    The node values are a linear reading of the samples (repeated ``x`` merged with ``weights``
    ``1 / sigma``, as the interpolation merged them), so a shift of every sample moves them by the same
    reading of the shift.
    """
    groups = DuplicateGroups.of(x, weights)
    ordered_x = x[groups.order]
    merged_x = ordered_x if groups.starts is None else ordered_x[groups.starts]
    return NodeReading.of(merged_x, node_count).apply(groups.merge(shifts))


def _check_equal_spacing(x: FloatArray) -> None:
    if x.size < 3:
        return
    steps = np.diff(x)
    mean_step = (x[-1] - x[0]) / (x.size - 1)
    if float(np.max(np.abs(steps - mean_step))) > SPACING_TOLERANCE * mean_step:
        raise ScienceInputError(
            "exact interpolation needs equally spaced x; these samples are not (give a degree to read "
            "equally spaced node values from the trace instead)"
        )


def _exact_stats(count: int) -> StatsDict:
    """Statistics of a curve through its nodes by construction: nothing to estimate."""
    stats: StatsDict = dict.fromkeys(STAT_NAMES, None)
    stats.update(n=count, dof=0)
    return stats


def _interpolation_result(
    start: float, stop: float, values: FloatArray, node_covariance: FloatArray, messages: list[str]
) -> FitResult:
    degree = values.size - 1
    step = (stop - start) / degree if degree else 1.0
    nodes = np.asarray(start + step * np.arange(degree + 1), dtype=np.float64)
    if degree:
        nodes[-1] = stop
    weights = equispaced_barycentric_weights(degree)
    coefficients = newton_forward_to_power(values.tolist(), start=start, step=step)
    domain = (float(start), float(stop))
    messages += polynomial_warnings(coefficients, domain=domain, condition=1.0)
    if degree >= RUNGE_DEGREE:
        messages.append(
            f"A degree {degree} polynomial through equally spaced nodes can swing far from the trace "
            "between the outer nodes (Runge's phenomenon); a least-squares polynomial or spline is safer."
        )
    conversion = node_values_to_power_matrix(degree + 1, start=start, step=step)
    covariance = conversion @ node_covariance @ conversion.T
    zeros = [0.0] * (degree + 1)
    return FitResult(
        family="interpolation",
        parameters={
            "nodes": nodes.tolist(),
            "values": values.tolist(),
            "weights": weights.tolist(),
            "coefficients": coefficients.tolist(),
        },
        standard_errors={
            "nodes": zeros,
            "values": _errors(node_covariance),
            "weights": zeros,
            "coefficients": _errors(covariance),
        },
        parameter_names=tuple(f"c{k}" for k in range(degree + 1)),
        covariance=covariance,
        stats=_exact_stats(degree + 1),
        domain=domain,
        warnings=tuple(messages),
        options={"degree": degree},
        model=BarycentricModel(nodes, np.asarray(values, dtype=np.float64), weights, node_covariance),
        independent_covariance=covariance,
        parameter_map=conversion,
        covariance_dof=math.inf,
    )


def node_values_to_power_matrix(node_count: int, *, start: float, step: float) -> FloatArray:
    """``d c / d f``: power-basis coefficients per node value (the Newton form is linear in the values)."""
    columns = [
        newton_forward_to_power([1.0 if k == j else 0.0 for k in range(node_count)], start=start, step=step)
        for j in range(node_count)
    ]
    matrix: FloatArray = np.column_stack(columns)
    return matrix


def _errors(covariance: FloatArray) -> list[float]:
    return [float(value) for value in np.sqrt(np.maximum(np.diag(covariance), 0.0))]
