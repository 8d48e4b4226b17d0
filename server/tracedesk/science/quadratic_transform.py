"""Second-order polynomial transform, pixels -> linear chart coordinates, with its Newton inverse.

The forward map is a quadratic in Hartley-normalised pixels (see :mod:`tracedesk.science.registration`,
which fits it). The inverse solves ``quadratic(p) = target`` per point by Newton's method, built for
speed on whole traces and grids (figures from ``bench/bench_calibration.py`` in the README):

* **Start.** A quadratic in chart coordinates, fitted once per transform by least squares to pairs
  (forward map of a grid, grid) over and around the control points' area. It is off by about the square of the
  map's bend instead of the bend itself, which saves one or two Newton steps. Points where Newton fails from there
  are solved again from the affine start (the inverse of an affine fit to the same control points).
* **Blocks.** Points are solved :data:`BLOCK_POINTS` at a time so the dozen temporary arrays of a Newton
  step stay in the processor's cache; on 1,000,000-point arrays the same arithmetic streams through main
  memory about fifty times per step and took 0.3-0.4 s.
* **Stopping.** A quadratic map has a constant second derivative ``H``, so from an iterate ``p`` with
  error ``e`` Newton's next error is exactly ``e' = J(p)^-1 H[e, e] / 2``, hence
  ``|e'| <= c |e|^2`` with ``c = h ||J(p)^-1|| / 2`` (``h`` bounds ``|H[e, e]|`` for unit ``e``). Writing
  ``s = e - e'`` for the step just taken, ``c |e| <= 1/2`` gives ``|e| <= 2 |s|`` and so
  ``|e'| <= 4 c |s|^2``. A block stops as soon as this bound is below the tolerance for every point,
  which usually saves the last (confirming) step. ``||J^-1||`` is bounded from the start's Jacobian
  ``J0`` by the Banach lemma, ``||J^-1|| <= ||J0^-1|| / (1 - ||J0^-1|| h d)`` after the points moved by
  at most ``d``, so the Jacobian norms are computed once per block. Blocks that do not settle in a few
  steps are judged point by point and their unfinished points solved on their own.

References
----------
J. E. Dennis, R. B. Schnabel, Numerical Methods for Unconstrained Optimization and Nonlinear Equations,
SIAM 1996, sec. 5.2 (Newton's method: quadratic convergence, the Banach perturbation lemma).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.homogeneous import invert_homogeneous_matrix

FloatArray = NDArray[np.float64]
IndexArray = NDArray[np.intp]

# Points per block of the Newton solve: 8192 float64 values are 64 KiB per array, so a block's working
# set (about 15 arrays) fits a 1-2 MiB per-core cache. The fastest of 2048, 8192, 32768 and unblocked on
# bench_calibration's polynomial2 case (2-core Xeon): smaller blocks pay Python's per-call overhead.
BLOCK_POINTS: Final = 8192
NEWTON_TOLERANCE_PX: Final = 1e-12
NEWTON_MAX_ITERATIONS: Final = 50
# Steps a whole block takes before its points are judged one by one (a start within the quadratic
# region converges in 1-3 steps).
BLOCK_STEPS: Final = 3
# The start is fitted on a grid over the control points' bounding box widened by this fraction of its
# size on every side, so points clicked near or past the outermost control points start well too.
START_MARGIN: Final = 0.25
START_GRID: Final = 17
FLOAT_FLOOR: Final = 8.0 * float(np.finfo(np.float64).eps)


def quadratic_monomials(points: FloatArray) -> FloatArray:
    """Monomials (1, u, v, u^2, u v, v^2) of each point, shape (n, 2) -> (n, 6)."""
    u, v = points[:, 0], points[:, 1]
    return np.stack([np.ones_like(u), u, v, u * u, u * v, v * v], axis=1)


def quadratic_values(coefficients: FloatArray, u: FloatArray, v: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Both rows of the quadratic map with coefficients (2, 6) at (u, v), element-wise.

    Nested as a0 + u (a1 + a3 u + a4 v) + v (a2 + a5 v): fewer passes and temporaries than the monomials.
    """
    rows = []
    for a in coefficients:
        value = np.multiply(u, a[3])
        value += v * a[4]
        value += a[1]
        value *= u
        last = np.multiply(v, a[5])
        last += a[2]
        last *= v
        value += last
        value += a[0]
        rows.append(value)
    return rows[0], rows[1]


def second_derivative_bound(coefficients: FloatArray) -> float:
    """h = sqrt(||H_x||^2 + ||H_y||^2) >= |H[e, e]| for unit e (spectral norms of each row's Hessian)."""
    total = 0.0
    for a in coefficients:
        hessian = np.array([[2.0 * a[3], a[4]], [a[4], 2.0 * a[5]]])
        total += float(np.max(np.abs(np.linalg.eigvalsh(hessian)))) ** 2
    return math.sqrt(total)


def fit_quadratic_start(coefficients: FloatArray, pixel_box: FloatArray, affine_start: FloatArray) -> FloatArray:
    """Coefficients (2, 6) of a quadratic chart -> pixel map close to the inverse, all normalised.

    Parameters
    ----------
    coefficients : ndarray, shape (2, 6)
        The forward map (normalised pixels -> normalised chart coordinates).
    pixel_box : ndarray, shape (2, 2)
        Lowest and highest normalised pixel coordinates of the control points.
    affine_start : ndarray, shape (3, 3)
        Normalised chart -> normalised pixel affine matrix, returned as a quadratic when the
        least-squares fit is not usable.
    """
    low, high = pixel_box
    margin = START_MARGIN * (high - low)
    axes = [np.linspace(low[i] - margin[i], high[i] + margin[i], START_GRID) for i in (0, 1)]
    grid = np.stack(np.meshgrid(*axes), axis=-1).reshape(-1, 2)
    chart = np.column_stack(quadratic_values(coefficients, grid[:, 0], grid[:, 1]))
    solution, _, rank, _ = np.linalg.lstsq(quadratic_monomials(chart), grid, rcond=None)
    if rank == 6 and np.all(np.isfinite(solution)):
        return np.asarray(solution.T, dtype=np.float64)
    fallback = np.zeros((2, 6))
    fallback[:, :3] = affine_start[:2, [2, 0, 1]]
    return fallback


@dataclass(frozen=True, eq=False)
class QuadraticTransform:
    """Second-order polynomial transform pixels -> chart coordinates, with a Newton inverse.

    Attributes
    ----------
    coefficients : ndarray, shape (2, 6)
        Coefficients of (1, u, v, u^2, u v, v^2) in normalised coordinates, one row per chart axis.
    pixel_normaliser, chart_normaliser : ndarray, shape (3, 3)
        Hartley normalisations of the control points' pixels and chart coordinates.
    affine_start : ndarray, shape (3, 3)
        Normalised chart -> normalised pixel matrix (inverse of an affine fit): the fallback start.
    quadratic_start : ndarray, shape (2, 6)
        Normalised chart -> normalised pixel quadratic (:func:`fit_quadratic_start`): the first start.
    """

    coefficients: FloatArray
    pixel_normaliser: FloatArray
    chart_normaliser: FloatArray
    affine_start: FloatArray
    quadratic_start: FloatArray

    @property
    def name(self) -> str:
        """``"polynomial2"``."""
        return "polynomial2"

    def pixels_to_chart(self, pixels: FloatArray) -> FloatArray:
        """Linear chart coordinates of pixels (px), shape (n, 2); in cache-sized blocks like the inverse."""
        denormaliser = invert_homogeneous_matrix(self.chart_normaliser)
        chart = np.empty((pixels.shape[0], 2))
        for first in range(0, pixels.shape[0], BLOCK_POINTS):
            rows = slice(first, first + BLOCK_POINTS)
            normalised = _scale_and_shift(self.pixel_normaliser, pixels[rows, 0], pixels[rows, 1])
            values = quadratic_values(self.coefficients, *normalised)
            chart[rows, 0], chart[rows, 1] = _scale_and_shift(denormaliser, *values)
        return chart

    def chart_to_pixels(self, chart: FloatArray) -> FloatArray:
        """Pixels (px) of chart coordinates by Newton iteration, to 1e-12 px or float resolution.

        Points where the iteration does not converge (outside the region where the polynomial can be
        inverted) come back as NaN.
        """
        solver = _NewtonSolver.for_transform(self)
        denormaliser = invert_homogeneous_matrix(self.pixel_normaliser)
        pixels = np.empty((chart.shape[0], 2))
        for first in range(0, chart.shape[0], BLOCK_POINTS):
            rows = slice(first, first + BLOCK_POINTS)
            target = _scale_and_shift(self.chart_normaliser, chart[rows, 0], chart[rows, 1])
            solved = solver.solve(*target, start=self.quadratic_start)
            pixels[rows, 0], pixels[rows, 1] = _scale_and_shift(denormaliser, *solved)
        retry = np.flatnonzero(np.isnan(pixels[:, 0]) & np.all(np.isfinite(chart), axis=1))
        if retry.size:
            affine = np.zeros((2, 6))
            affine[:, :3] = self.affine_start[:2, [2, 0, 1]]
            target = _scale_and_shift(self.chart_normaliser, chart[retry, 0], chart[retry, 1])
            pixels[retry, 0], pixels[retry, 1] = _scale_and_shift(denormaliser, *solver.solve(*target, start=affine))
        return pixels


def _scale_and_shift(normaliser: FloatArray, first: FloatArray, second: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Apply a Hartley normaliser (or its inverse) to coordinate columns, as new contiguous arrays.

    These matrices are a uniform scale plus a shift (:func:`~tracedesk.science.registration.normalising_matrix`),
    so only the diagonal and the last column are used: two passes per coordinate, and no inf * 0.
    """
    columns = []
    for axis, coordinate in enumerate((first, second)):
        column = np.multiply(coordinate, normaliser[axis, axis])
        column += normaliser[axis, 2]
        columns.append(column)
    return columns[0], columns[1]


@dataclass(frozen=True)
class _NewtonSolver:
    """Newton's method for quadratic(p) = target on one block of normalised points.

    ``tolerance`` is :data:`NEWTON_TOLERANCE_PX` in normalised units; ``offset`` the normalised
    distance of the pixel origin, for the float-resolution floor of large pixel coordinates.
    """

    coefficients: FloatArray
    curvature: float  # h of second_derivative_bound
    tolerance: float
    offset: float

    @classmethod
    def for_transform(cls, transform: QuadraticTransform) -> _NewtonSolver:
        scale = float(transform.pixel_normaliser[0, 0])  # normalised units per pixel
        return cls(
            coefficients=transform.coefficients,
            curvature=second_derivative_bound(transform.coefficients),
            tolerance=NEWTON_TOLERANCE_PX * scale,
            offset=float(np.hypot(*transform.pixel_normaliser[:2, 2])),
        )

    def solve(self, target_u: FloatArray, target_v: FloatArray, *, start: FloatArray) -> tuple[FloatArray, FloatArray]:
        """Normalised pixels (u, v) mapping to the normalised targets; NaN where Newton fails.

        ``start`` holds the (2, 6) coefficients of the quadratic giving the first iterate.
        """
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            u, v = quadratic_values(start, target_u, target_v)
            a0, b0 = self.coefficients[:, 0]
            # Twice the residual is computed (see _step), so the targets are doubled once here.
            goal_u, goal_v = 2.0 * (target_u - a0), 2.0 * (target_v - b0)
            self._solve_in_place(u, v, goal_u, goal_v, NEWTON_MAX_ITERATIONS)
        return u, v

    def _floor(self, u: FloatArray, v: FloatArray) -> float:
        """Tolerance plus the float resolution of the largest coordinate (normalised units; NaN if any is)."""
        if u.size == 0:
            return self.tolerance
        largest = max(float(u.max()), -float(u.min())) + max(float(v.max()), -float(v.min()))
        return self.tolerance + FLOAT_FLOOR * (largest + self.offset)

    def _solve_in_place(self, u: FloatArray, v: FloatArray, goal_u: FloatArray, goal_v: FloatArray, steps: int) -> None:
        """Iterate on (u, v) in place for at most ``steps`` (>= 1) steps; unsettled or failed points end as NaN."""
        tolerance = self._floor(u, v)
        inverse_norm, moved = math.nan, 0.0
        for taken in range(1, steps + 1):
            jacobian, det, step2 = self._step(u, v, goal_u, goal_v)
            if taken == 1:
                inverse_norm = math.sqrt(float(np.fmax.reduce(_inverse_norm2(jacobian, det), initial=0.0)))
            largest2 = float(step2.max()) if step2.size else 0.0
            if _settled(largest2, self._quadratic_factor(inverse_norm, moved), tolerance):
                return
            moved += math.sqrt(largest2) if math.isfinite(largest2) else math.inf
            if taken < min(BLOCK_STEPS, steps) and math.isfinite(largest2):
                continue
            unfinished = self._unfinished(u, v, jacobian, det, step2)
            if unfinished.size == 0:
                return
            if 2 * unfinished.size <= u.size or taken == steps:
                self._solve_subset(u, v, goal_u, goal_v, unfinished, steps - taken)
                return

    def _solve_subset(
        self, u: FloatArray, v: FloatArray, goal_u: FloatArray, goal_v: FloatArray, rows: IndexArray, steps: int
    ) -> None:
        if steps <= 0:
            u[rows], v[rows] = np.nan, np.nan
            return
        part_u, part_v = u[rows], v[rows]
        self._solve_in_place(part_u, part_v, goal_u[rows], goal_v[rows], steps)
        u[rows], v[rows] = part_u, part_v

    def _quadratic_factor(self, inverse_norm: float, moved: float) -> float:
        """c = h ||J^-1|| / 2 at the current iterates (Banach lemma from the start's Jacobian)."""
        shrink = 1.0 - inverse_norm * self.curvature * moved
        return 0.5 * self.curvature * inverse_norm / shrink if shrink > 0.0 else math.inf

    def _unfinished(
        self,
        u: FloatArray,
        v: FloatArray,
        jacobian: tuple[FloatArray, ...],
        det: FloatArray,
        step2: FloatArray,
    ) -> IndexArray:
        """Indices of points not yet within tolerance (each judged by its own Jacobian); failed -> NaN."""
        failed = ~np.isfinite(step2)
        u[failed], v[failed] = np.nan, np.nan
        # 4 c |s|^2 <= tolerance and 4 c |s| <= 1 with c^2 = h^2 ||J^-1||^2 / 4, squared.
        factor2 = 4.0 * self.curvature**2 * _inverse_norm2(jacobian, det)
        limit = self.tolerance + FLOAT_FLOOR * (np.abs(u) + np.abs(v) + self.offset)
        settled = (factor2 * step2 * step2 <= limit * limit) & (factor2 * step2 <= 1.0)
        return np.flatnonzero(~settled & ~failed)

    def _step(
        self, u: FloatArray, v: FloatArray, goal_u: FloatArray, goal_v: FloatArray
    ) -> tuple[tuple[FloatArray, ...], FloatArray, FloatArray]:
        """One Newton step in place: the Jacobian and determinant at the old (u, v) and |step|^2.

        With the Jacobian rows (a1 + 2 a3 u + a4 v, a2 + a4 u + 2 a5 v), Euler's theorem for the
        quadratic part gives 2 (f - a0) = u (a1 + J_u) + v (a2 + J_v), so the residual reuses the Jacobian.
        """
        scratch = np.empty_like(u)
        jacobian = []
        residuals = []
        for a, goal in zip(self.coefficients, (goal_u, goal_v), strict=True):
            d_du = np.multiply(u, 2.0 * a[3])
            d_du += np.multiply(v, a[4], out=scratch)
            d_du += a[1]
            d_dv = np.multiply(v, 2.0 * a[5])
            d_dv += np.multiply(u, a[4], out=scratch)
            d_dv += a[2]
            twice = np.add(d_du, a[1])
            twice *= u
            np.add(d_dv, a[2], out=scratch)
            scratch *= v
            twice += scratch
            twice -= goal
            jacobian += [d_du, d_dv]
            residuals.append(twice)
        j00, j01, j10, j11 = jacobian
        det = np.multiply(j00, j11)
        det -= np.multiply(j01, j10, out=scratch)
        doubled_det = 2.0 * det  # the residuals are doubled
        du = np.multiply(j11, residuals[0])
        du -= np.multiply(j01, residuals[1], out=scratch)
        du /= doubled_det
        dv = np.multiply(j00, residuals[1])
        dv -= np.multiply(j10, residuals[0], out=scratch)
        dv /= doubled_det
        u -= du
        v -= dv
        du *= du
        du += np.multiply(dv, dv, out=scratch)
        return tuple(jacobian), det, du


def _settled(largest_step2: float, factor: float, tolerance: float) -> bool:
    """Whether 4 c |s|^2 <= tolerance and 4 c |s| <= 1 hold for the block's largest step |s|."""
    if not (math.isfinite(largest_step2) and math.isfinite(factor)):
        return False
    step = math.sqrt(largest_step2)
    return 4.0 * factor * largest_step2 <= tolerance and 4.0 * factor * step <= 1.0


def _inverse_norm2(jacobian: tuple[FloatArray, ...], det: FloatArray) -> FloatArray:
    """||J^-1||_F^2 = ||J||_F^2 / det^2 per point (an upper bound of the spectral norm squared)."""
    total = np.zeros_like(det)
    for part in jacobian:
        total += part * part
    total /= det * det
    return total
