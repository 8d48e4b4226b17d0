"""Registration of a sheet: control points -> pixel <-> chart-coordinate transforms, by least squares.

Transforms map image pixels (u right, v down; origin at the top-left corner of the top-left pixel) to
*linear chart coordinates* (see :mod:`tracedesk.science.axes`) and back. Four models, in order of
complexity, with the minimum number of control points each needs (standard photogrammetry / GIS practice):

=============  ====  ==========================================================
similarity      2    rotation, uniform scale, translation; a reflection is allowed because image
                     v runs down while chart y usually runs up
affine          3    any linear map plus translation
projective      4    plane homography (camera tilt, curled paper seen in perspective)
polynomial2     6    second-order polynomial in u and v (uneven paper shrinkage)
=============  ====  ==========================================================

Every fit works on Hartley-normalised coordinates (centroid at the origin, RMS distance sqrt(2)) so the
normal equations stay well conditioned whatever the pixel and chart magnitudes. Fits minimise the squared
chart-coordinate error of pixels -> chart (ordinary least squares; the DLT algebraic error for the
projective model). Every transform has an exact inverse: closed form for the matrix models, Newton
iterations for the polynomial (:mod:`tracedesk.science.quadratic_transform`).

References
----------
R. I. Hartley, "In defense of the eight-point algorithm", IEEE PAMI 19(6):580-593, 1997 (normalisation).
R. Hartley, A. Zisserman, Multiple View Geometry, 2nd ed., 2004, sec. 4.1-4.4 (DLT for homographies).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Final, Protocol

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.homogeneous import apply_homogeneous_matrix, invert_homogeneous_matrix
from tracedesk.science.quadratic_transform import QuadraticTransform, fit_quadratic_start, quadratic_monomials

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]

TRANSFORM_NAMES: Final = ("similarity", "affine", "projective", "polynomial2")
TRANSFORM_MIN_POINTS: Final = {"similarity": 2, "affine": 3, "projective": 4, "polynomial2": 6}
TRANSFORM_CHOICES: Final = ("auto", *TRANSFORM_NAMES)

# Below this ratio of spreads (across / along the best line) points count as lying on one line.
COLLINEAR_RATIO: Final = 1e-3
NEARLY_COLLINEAR_RATIO: Final = 1e-2
# Two control points closer than this are the same spot on the sheet.
SAME_PIXEL_PX: Final = 0.5
# Auto choice: a model whose leave-one-out RMS is within this of the best counts as equally good,
# and the simplest of those wins (parsimony).
LOO_TIE_RELATIVE: Final = 0.02
LOO_TIE_ABSOLUTE_PX: Final = 1e-6
# When no checkable model predicts left-out points better than this, an exact fit of a more general
# model is preferred (with a warning that nothing checks it).
EXACT_FIT_PREFERENCE_PX: Final = 1.0
# A residual stands out when it exceeds this multiple of the median residual and the floor below.
OUTLIER_MEDIAN_FACTOR: Final = 3.0
OUTLIER_FLOOR_PX: Final = 0.5
# Coordinates and geometry beyond this size are refused: their squares would overflow float64.
MAX_MAGNITUDE: Final = 1e100


def as_point_array(points: ArrayLike, *, field: str = "points", finite: bool = False) -> FloatArray:
    """Coordinates as a float64 array of shape (n, 2).

    Parameters
    ----------
    points : array_like
        Pairs of coordinates (pixels or values); a single pair is accepted as shape (2,).
    field : str
        Name used in error messages.
    finite : bool
        Refuse NaN, infinite and absurdly large (> 1e100) coordinates (for control points and
        geometry) instead of passing them through.

    Raises
    ------
    ScienceInputError
        If the input is not numeric, not pairs, or (with ``finite``) holds NaN, infinity or > 1e100.
    """
    try:
        array = np.array(points, dtype=np.float64)
    except (TypeError, ValueError) as error:
        raise ScienceInputError(f"{field}: expected pairs of numbers") from error
    if array.ndim == 1 and array.shape[0] == 2:
        array = array.reshape(1, 2)
    if array.ndim != 2 or array.shape[1] != 2:
        raise ScienceInputError(f"{field}: expected an array of shape (n, 2), got shape {array.shape}")
    if finite:
        with np.errstate(invalid="ignore"):
            bad = ~np.all(np.abs(array) <= MAX_MAGNITUDE, axis=1)
        if np.any(bad):
            raise ScienceInputError(f"{field}[{int(np.flatnonzero(bad)[0])}]: coordinates must be finite numbers")
    return array


class PlaneTransform(Protocol):
    """A fitted transform between pixels and linear chart coordinates, both of shape (n, 2)."""

    @property
    def name(self) -> str:
        """Model name, one of :data:`TRANSFORM_NAMES`."""
        ...

    def pixels_to_chart(self, pixels: FloatArray) -> FloatArray:
        """Linear chart coordinates of pixels (px)."""
        ...

    def chart_to_pixels(self, chart: FloatArray) -> FloatArray:
        """Pixels (px) of linear chart coordinates."""
        ...


def normalising_matrix(points: FloatArray) -> FloatArray:
    """Hartley normalisation: 3x3 matrix moving the centroid to 0 and the RMS distance to sqrt(2)."""
    centre = points.mean(axis=0)
    rms = float(np.sqrt(np.mean((points - centre) ** 2)))
    if not rms > 0.0 or not math.isfinite(rms):
        raise ScienceInputError("control_points: all points are at one place")
    if rms <= 1e-12 * float(np.max(np.abs(centre))):
        raise ScienceInputError("control_points: the points are too close together to tell apart")
    matrix = np.eye(3)
    matrix[:2, :2] /= rms
    matrix[:2, 2] = -centre / rms
    return matrix


@dataclass(frozen=True, eq=False)
class MatrixTransform:
    """Similarity, affine or projective transform held as 3x3 homogeneous matrices.

    Attributes
    ----------
    name : str
        ``"similarity"``, ``"affine"`` or ``"projective"``.
    forward_matrix : ndarray, shape (3, 3)
        Pixels (px) -> linear chart coordinates.
    inverse_matrix : ndarray, shape (3, 3)
        Linear chart coordinates -> pixels (px).
    """

    name: str
    forward_matrix: FloatArray
    inverse_matrix: FloatArray

    def pixels_to_chart(self, pixels: FloatArray) -> FloatArray:
        """Linear chart coordinates of pixels (px), shape (n, 2)."""
        return apply_homogeneous_matrix(self.forward_matrix, pixels)

    def chart_to_pixels(self, chart: FloatArray) -> FloatArray:
        """Pixels (px) of linear chart coordinates, shape (n, 2)."""
        return apply_homogeneous_matrix(self.inverse_matrix, chart)


def _matrix_transform(
    name: str, normalised: FloatArray, pixel_norm: FloatArray, chart_norm: FloatArray
) -> MatrixTransform:
    """Undo the normalisation on both sides; each direction is composed separately for accuracy."""
    forward = invert_homogeneous_matrix(chart_norm) @ normalised @ pixel_norm
    inverse = invert_homogeneous_matrix(pixel_norm) @ invert_homogeneous_matrix(normalised) @ chart_norm
    if name != "projective":
        forward[2] = (0.0, 0.0, 1.0)
        inverse[2] = (0.0, 0.0, 1.0)
    return MatrixTransform(name=name, forward_matrix=forward, inverse_matrix=inverse)


def _similarity_normalised(pixels: FloatArray, chart: FloatArray) -> tuple[FloatArray, float]:
    """Least-squares proper similarity (no reflection) and its residual sum of squares."""
    n = pixels.shape[0]
    u, v = pixels[:, 0], pixels[:, 1]
    design = np.zeros((2 * n, 4))
    design[:n] = np.stack([u, -v, np.ones(n), np.zeros(n)], axis=1)
    design[n:] = np.stack([v, u, np.zeros(n), np.ones(n)], axis=1)
    target = np.concatenate([chart[:, 0], chart[:, 1]])
    (a, b, tx, ty), *_ = np.linalg.lstsq(design, target, rcond=None)
    matrix = np.array([[a, -b, tx], [b, a, ty], [0.0, 0.0, 1.0]])
    residual = float(np.sum((design @ np.array([a, b, tx, ty]) - target) ** 2))
    return matrix, residual


def _fit_similarity(pixels: FloatArray, chart: FloatArray) -> FloatArray:
    """Proper or reflected similarity, whichever fits better.

    With two points (or points on one line) both fit equally well; then the one closer to an upright
    scan (smaller rotation) wins, which makes chart y point up the image when the labels say so.
    """
    flip = np.diag([1.0, -1.0, 1.0])
    proper, proper_ss = _similarity_normalised(pixels, chart)
    reflected_core, reflected_ss = _similarity_normalised(pixels * (1.0, -1.0), chart)
    tie = abs(proper_ss - reflected_ss) <= 1e-9 * pixels.shape[0]
    if not tie:
        return proper if proper_ss < reflected_ss else reflected_core @ flip
    proper_angle = abs(math.atan2(proper[1, 0], proper[0, 0]))
    reflected_angle = abs(math.atan2(reflected_core[1, 0], reflected_core[0, 0]))
    return proper if proper_angle <= reflected_angle else reflected_core @ flip


def _fit_affine(pixels: FloatArray, chart: FloatArray) -> FloatArray:
    design = np.column_stack([pixels, np.ones(pixels.shape[0])])
    solution, _, rank, _ = np.linalg.lstsq(design, chart, rcond=None)
    if rank < 3:
        raise ScienceInputError("control_points: the points lie on one line; an affine fit needs a spread")
    matrix = np.eye(3)
    matrix[:2] = solution.T
    if abs(np.linalg.det(matrix[:2, :2])) < 1e-12:
        raise ScienceInputError("control_points: the values lie on one line; the fit would be singular")
    return matrix


def _has_three_on_a_line(points: FloatArray) -> bool:
    """Whether some three of (normalised) points nearly lie on one line (twice the triangle area < 1e-3)."""
    for i, j, k in itertools.combinations(range(points.shape[0]), 3):
        first, second = points[j] - points[i], points[k] - points[i]
        if abs(first[0] * second[1] - first[1] * second[0]) < COLLINEAR_RATIO:
            return True
    return False


def _fit_projective(pixels: FloatArray, chart: FloatArray) -> FloatArray:
    """Normalised DLT: the right singular vector of the smallest singular value.

    With exactly four points, three on one line (in pixels or values) leave the homography degenerate.
    """
    if pixels.shape[0] == 4 and (_has_three_on_a_line(pixels) or _has_three_on_a_line(chart)):
        raise ScienceInputError("control_points: three of the four points lie on one line; a projective fit needs none")
    n = pixels.shape[0]
    u, v = pixels[:, 0], pixels[:, 1]
    x, y = chart[:, 0], chart[:, 1]
    zeros, ones = np.zeros(n), np.ones(n)
    rows_x = np.stack([u, v, ones, zeros, zeros, zeros, -x * u, -x * v, -x], axis=1)
    rows_y = np.stack([zeros, zeros, zeros, u, v, ones, -y * u, -y * v, -y], axis=1)
    # The reduced SVD is enough (and fast for many points) once there are at least 9 rows; 4 points give only 8.
    _, singular, right = np.linalg.svd(np.vstack([rows_x, rows_y]), full_matrices=2 * n < 9)
    if singular[-2] <= 1e-10 * singular[0]:
        raise ScienceInputError("control_points: three of the points lie on one line; a projective fit is not unique")
    matrix = right[-1].reshape(3, 3)
    if abs(np.linalg.det(matrix)) < 1e-12:
        raise ScienceInputError("control_points: the projective fit is singular (points on one line)")
    weights = pixels @ matrix[2, :2] + matrix[2, 2]
    if np.any(weights > 0) and np.any(weights < 0):
        raise ScienceInputError("control_points: the projective fit puts its horizon between the control points")
    divisor = matrix[2, 2] if abs(matrix[2, 2]) > 1e-12 else np.sign(weights[0])
    return np.asarray(matrix / divisor, dtype=np.float64)


def _fit_quadratic(pixels: FloatArray, chart: FloatArray) -> FloatArray:
    solution, _, rank, _ = np.linalg.lstsq(quadratic_monomials(pixels), chart, rcond=None)
    if rank < 6:
        raise ScienceInputError(
            "control_points: the points lie on one conic (a circle, or two lines); "
            "polynomial2 needs 6 points in general position"
        )
    return np.asarray(solution.T, dtype=np.float64)


def fit_transform(pixels: FloatArray, chart: FloatArray, *, name: str) -> PlaneTransform:
    """Least-squares transform ``name`` from pixels (px) to linear chart coordinates.

    Parameters
    ----------
    pixels : ndarray, shape (n, 2)
        Control point pixels (px), finite.
    chart : ndarray, shape (n, 2)
        Their linear chart coordinates, finite.
    name : str
        One of :data:`TRANSFORM_NAMES`.

    Raises
    ------
    ScienceInputError
        For an unknown model, too few points, or a degenerate configuration.
    """
    if name not in TRANSFORM_MIN_POINTS:
        raise ScienceInputError(
            f"transform: unknown transform {name!r}; expected one of {', '.join(TRANSFORM_CHOICES)}"
        )
    if pixels.shape[0] < TRANSFORM_MIN_POINTS[name]:
        raise ScienceInputError(f"control_points: {name} needs at least {TRANSFORM_MIN_POINTS[name]} points")
    pixel_norm, chart_norm = normalising_matrix(pixels), normalising_matrix(chart)
    p, c = apply_homogeneous_matrix(pixel_norm, pixels), apply_homogeneous_matrix(chart_norm, chart)
    if name == "polynomial2":
        coefficients = _fit_quadratic(p, c)
        affine_start = invert_homogeneous_matrix(_fit_affine(p, c))
        pixel_box = np.stack([p.min(axis=0), p.max(axis=0)])
        quadratic_start = fit_quadratic_start(coefficients, pixel_box, affine_start)
        return QuadraticTransform(coefficients, pixel_norm, chart_norm, affine_start, quadratic_start)
    fitters = {"similarity": _fit_similarity, "affine": _fit_affine, "projective": _fit_projective}
    return _matrix_transform(name, fitters[name](p, c), pixel_norm, chart_norm)


def count_distinct_pixels(pixels: FloatArray, *, tolerance_px: float = SAME_PIXEL_PX) -> int:
    """Number of distinct spots among the pixels (points chained closer than ``tolerance_px`` count once)."""
    if len(pixels) < 2:
        return len(pixels)
    pairs = cKDTree(pixels).query_pairs(tolerance_px, output_type="ndarray")
    graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(len(pixels), len(pixels)))
    count, _ = connected_components(graph, directed=False)
    return int(count)


def spread_ratio(points: FloatArray) -> float:
    """Spread across the best-fitting line divided by the spread along it (0 for points on a line)."""
    singular = np.linalg.svd(points - points.mean(axis=0), compute_uv=False)
    return float(singular[1] / singular[0]) if singular[0] > 0 else 0.0


def _standardised(chart: FloatArray) -> FloatArray:
    spread = chart.std(axis=0)
    return np.asarray((chart - chart.mean(axis=0)) / np.where(spread > 0, spread, 1.0), dtype=np.float64)


def _duplicate_warnings(pixels: FloatArray, chart: FloatArray) -> list[str]:
    warnings: list[str] = []
    scale = np.maximum(np.abs(chart).max(axis=0), 1e-300)
    for i in range(pixels.shape[0]):
        for j in range(i + 1, pixels.shape[0]):
            apart = float(np.hypot(*(pixels[i] - pixels[j])))
            same_value = bool(np.all(np.abs(chart[i] - chart[j]) <= 1e-12 * scale))
            pair = f"control_points[{i}] and control_points[{j}]"
            if apart < SAME_PIXEL_PX and same_value:
                warnings.append(f"{pair} are duplicates (same pixel and value)")
            elif apart < SAME_PIXEL_PX:
                warnings.append(f"{pair} sit on the same pixel but have different values")
            elif same_value:
                warnings.append(f"{pair} have the same value but lie {apart:.1f} px apart")
    return warnings


def inspect_control_points(pixels: FloatArray, chart: FloatArray, *, transform: str) -> list[str]:
    """Check control points before fitting; return warnings, raise for what cannot be fitted.

    Parameters
    ----------
    pixels : ndarray, shape (n, 2)
        Control point pixels (px), finite.
    chart : ndarray, shape (n, 2)
        Their linear chart coordinates, finite.
    transform : str
        Requested model or ``"auto"``.

    Raises
    ------
    ScienceInputError
        Fewer than 2 distinct points, fewer than the requested model's minimum, or (from 3 points on)
        points or values on one line for any model but a requested similarity.
    """
    if transform not in TRANSFORM_CHOICES:
        raise ScienceInputError(
            f"transform: unknown transform {transform!r}; expected one of {', '.join(TRANSFORM_CHOICES)}"
        )
    warnings = _duplicate_warnings(pixels, chart)
    distinct = count_distinct_pixels(pixels)
    needed = 2 if transform == "auto" else TRANSFORM_MIN_POINTS[transform]
    if distinct < needed:
        model = "a calibration" if transform == "auto" else f"a {transform} transform"
        raise ScienceInputError(f"control_points: {model} needs at least {needed} distinct points, got {distinct}")
    if distinct >= 3 and transform != "similarity":
        for label, ratio in (("points", spread_ratio(pixels)), ("values", spread_ratio(_standardised(chart)))):
            if ratio < COLLINEAR_RATIO:
                raise ScienceInputError(f"control_points: the {label} lie on one line; add points across it")
            if ratio < NEARLY_COLLINEAR_RATIO:
                warnings.append(f"control point {label} lie nearly on one line; the fit across it is weak")
    if transform != "auto" and distinct == TRANSFORM_MIN_POINTS[transform]:
        warnings.append(f"{distinct} points fit a {transform} exactly: nothing checks them; add points")
    return warnings


InverseBuilder = Callable[[FloatArray, FloatArray, str], Callable[[FloatArray], FloatArray]]


def leave_one_out_errors_px(
    pixels: FloatArray, chart: FloatArray, *, transform: str, build_inverse: InverseBuilder
) -> FloatArray:
    """Distance (px) between each control point and where a fit without it puts its value.

    Parameters
    ----------
    pixels, chart : ndarray, shape (n, 2)
        Control points (px) and their linear chart coordinates.
    transform : str
        Model to refit, one of :data:`TRANSFORM_NAMES`.
    build_inverse : callable
        ``build_inverse(pixels, chart, transform)`` fits on a subset and returns its chart -> pixel map.

    Returns
    -------
    ndarray, shape (n,)
        Leave-one-out errors (px); ``inf`` where the subset cannot be fitted.
    """
    errors = np.full(pixels.shape[0], np.inf)
    for index in range(pixels.shape[0]):
        keep = np.arange(pixels.shape[0]) != index
        try:
            inverse = build_inverse(pixels[keep], chart[keep], transform)
        except (ScienceInputError, np.linalg.LinAlgError):
            continue
        predicted = inverse(chart[index : index + 1])[0]
        error = float(np.hypot(*(pixels[index] - predicted)))
        errors[index] = error if math.isfinite(error) else math.inf
    return errors


def root_mean_square(distances: FloatArray) -> float:
    """sqrt(mean(d^2)); ``inf`` if any distance is infinite or NaN, NaN for no distances."""
    if distances.size == 0:
        return math.nan
    if not np.all(np.isfinite(distances)):
        return math.inf
    with np.errstate(over="ignore"):
        return float(np.sqrt(np.mean(distances**2)))


@dataclass(frozen=True)
class TransformChoice:
    """The model chosen for a registration and the evidence behind it.

    Attributes
    ----------
    name : str
        Chosen model, one of :data:`TRANSFORM_NAMES`.
    loo_errors_px : ndarray, shape (n,), or None
        Leave-one-out errors (px) of the chosen model; None when it has no spare point to leave out.
    loo_rms_by_transform : dict
        Leave-one-out RMS (px) of every model tried; ``inf`` when a subset could not be fitted.
    warnings : tuple of str
        Notes on the choice.
    """

    name: str
    loo_errors_px: FloatArray | None
    loo_rms_by_transform: dict[str, float]
    warnings: tuple[str, ...]


def choose_transform(
    pixels: FloatArray, chart: FloatArray, *, requested: str, build_inverse: InverseBuilder
) -> TransformChoice:
    """Choose the model: the requested one, or by leave-one-out error when ``requested == "auto"``.

    Automatic choice considers every model with at least one spare point (so a point can be left
    out), takes the lowest leave-one-out RMS, and among models within 2 % of it the simplest. If no
    such model predicts left-out points to within 1 px but a more general model fits the points
    exactly, the exact model is taken with a warning.
    """
    distinct = count_distinct_pixels(pixels)
    names = TRANSFORM_NAMES if requested == "auto" else (requested,)
    loo_errors = {
        name: leave_one_out_errors_px(pixels, chart, transform=name, build_inverse=build_inverse)
        for name in names
        if TRANSFORM_MIN_POINTS[name] <= distinct - 1
    }
    loo_rms = {name: root_mean_square(errors) for name, errors in loo_errors.items()}
    if requested != "auto":
        return TransformChoice(requested, loo_errors.get(requested), loo_rms, ())
    return _automatic_choice(distinct, loo_errors, loo_rms)


def _automatic_choice(distinct: int, loo_errors: dict[str, FloatArray], loo_rms: dict[str, float]) -> TransformChoice:
    finite = {name: rms for name, rms in loo_rms.items() if math.isfinite(rms)}
    exact = [name for name in TRANSFORM_NAMES if TRANSFORM_MIN_POINTS[name] == distinct]
    if finite:
        best = min(finite.values())
        name = next(
            n
            for n in TRANSFORM_NAMES
            if n in finite and finite[n] <= best * (1 + LOO_TIE_RELATIVE) + LOO_TIE_ABSOLUTE_PX
        )
        if not (exact and best > EXACT_FIT_PREFERENCE_PX):
            return TransformChoice(name, loo_errors[name], loo_rms, ())
    if not exact:
        raise ScienceInputError("control_points: no transform can be fitted to these points")
    note = f"{distinct} points fit a {exact[0]} exactly: nothing checks them; add points"
    if exact[0] == "similarity":
        note += " (a similarity also assumes one chart unit spans the same length on both axes)"
    return TransformChoice(exact[0], None, loo_rms, (note,))


@dataclass(frozen=True)
class ResidualReport:
    """How well a calibration reproduces its control points.

    Attributes
    ----------
    transform : str
        Model used (``"similarity"``, ..., or ``"circular"`` etc. for geometric calibrations).
    residuals_px : ndarray, shape (n, 2)
        Clicked pixel minus the pixel where the calibration puts the point's known value (px).
    residual_distance_px : ndarray, shape (n,)
        Length of each pixel residual (px).
    residuals_values : ndarray, shape (n, 2)
        Value the calibration reads at the clicked pixel minus the known value (axis units; NaN
        where a value was not given).
    rms_px : float or None
        sqrt(sum(du^2 + dv^2) / n) (px); None without points.
    rms_values : tuple of (float or None)
        RMS of the value residuals per axis (x units, y units).
    loo_errors_px : ndarray, shape (n,), or None
        Leave-one-out errors (px), when the model has a spare point.
    loo_rms_px : float or None
        RMS of ``loo_errors_px`` (px).
    loo_rms_by_transform : dict
        Leave-one-out RMS (px) of every model considered (None where not computable).
    outliers : ndarray of bool, shape (n,)
        Points whose residual stands out (> 3 x the median residual and > 0.5 px).
    warnings : tuple of str
        Plain-language notes for the user.
    """

    transform: str
    residuals_px: FloatArray
    residual_distance_px: FloatArray
    residuals_values: FloatArray
    rms_px: float | None
    rms_values: tuple[float | None, float | None]
    loo_errors_px: FloatArray | None
    loo_rms_px: float | None
    loo_rms_by_transform: dict[str, float | None]
    outliers: BoolArray
    warnings: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dictionary (lists and floats; None for NaN or infinity)."""
        return {
            "transform": self.transform,
            "residuals_px": _json_list(self.residuals_px),
            "residual_distance_px": _json_list(self.residual_distance_px),
            "residuals_values": _json_list(self.residuals_values),
            "rms_px": _json_float(self.rms_px),
            "rms_values": [_json_float(value) for value in self.rms_values],
            "loo_errors_px": None if self.loo_errors_px is None else _json_list(self.loo_errors_px),
            "loo_rms_px": _json_float(self.loo_rms_px),
            "loo_rms_by_transform": {k: _json_float(v) for k, v in self.loo_rms_by_transform.items()},
            "outliers": [bool(flag) for flag in self.outliers],
            "warnings": list(self.warnings),
        }


def _json_float(value: float | None) -> float | None:
    return value if value is not None and math.isfinite(value) else None


def _json_list(array: FloatArray) -> list[Any]:
    return [_json_list(row) if isinstance(row, np.ndarray) else _json_float(float(row)) for row in array]


def _finite_or_none(value: float) -> float | None:
    return value if math.isfinite(value) else None


def outlier_flags(distances_px: FloatArray) -> BoolArray:
    """Residuals that stand out: > 3 x the median residual and > 0.5 px (robust, from few points)."""
    if distances_px.size < 3:
        return np.zeros(distances_px.shape, dtype=bool)
    median = float(np.median(distances_px))
    flags: BoolArray = (distances_px > OUTLIER_MEDIAN_FACTOR * median) & (distances_px > OUTLIER_FLOOR_PX)
    return flags


def residual_report(
    *,
    transform: str,
    pixels: FloatArray,
    values: FloatArray,
    predicted_pixels: FloatArray,
    predicted_values: FloatArray,
    choice: TransformChoice | None = None,
    warnings: tuple[str, ...] = (),
    x_period_hours: float | None = None,
) -> ResidualReport:
    """Residual report of a calibration at its control (or check) points.

    Parameters
    ----------
    transform : str
        Model name to report.
    pixels, values : ndarray, shape (n, 2)
        Clicked pixels (px) and known values (axis units).
    predicted_pixels : ndarray, shape (n, 2)
        Pixels (px) where the calibration puts the known values.
    predicted_values : ndarray, shape (n, 2)
        Values (axis units) the calibration reads at the clicked pixels.
    choice : TransformChoice or None
        Model choice with leave-one-out errors, for registered calibrations.
    warnings : tuple of str
        Warnings gathered before the fit.
    x_period_hours : float or None
        Period of a cyclic time axis (circular charts): x residuals are wrapped to [-P/2, P/2).
    """
    residuals_px = pixels - predicted_pixels
    distances = np.hypot(residuals_px[:, 0], residuals_px[:, 1])
    residuals_values = predicted_values - values
    if x_period_hours is not None:
        half = 0.5 * x_period_hours
        residuals_values[:, 0] = np.mod(residuals_values[:, 0] + half, x_period_hours) - half
    outliers = outlier_flags(distances)
    notes = list(warnings) + list(choice.warnings if choice else ())
    notes += [f"control_points[{i}] stands out: {distances[i]:.2f} px off" for i in np.flatnonzero(outliers)]
    loo = choice.loo_errors_px if choice else None
    loo_rms = root_mean_square(loo) if loo is not None else math.nan
    if loo is not None and not math.isfinite(loo_rms):
        notes.append("leave-one-out check incomplete: some subsets of the points cannot be fitted")
    return ResidualReport(
        transform=transform,
        residuals_px=residuals_px,
        residual_distance_px=distances,
        residuals_values=residuals_values,
        rms_px=_finite_or_none(root_mean_square(distances)),
        rms_values=(
            _finite_or_none(_nan_rms(residuals_values[:, 0])),
            _finite_or_none(_nan_rms(residuals_values[:, 1])),
        ),
        loo_errors_px=loo,
        loo_rms_px=_finite_or_none(loo_rms),
        loo_rms_by_transform={
            k: _finite_or_none(v) for k, v in (choice.loo_rms_by_transform if choice else {}).items()
        },
        outliers=outliers,
        warnings=tuple(notes),
    )


def _nan_rms(residuals: FloatArray) -> float:
    known = residuals[~np.isnan(residuals)]
    with np.errstate(over="ignore"):
        return float(np.sqrt(np.mean(known**2))) if known.size else math.nan


def empty_residual_report(transform: str, *, warnings: tuple[str, ...] = ()) -> ResidualReport:
    """Report for a calibration without control or check points (nothing to measure)."""
    return ResidualReport(
        transform=transform,
        residuals_px=np.zeros((0, 2)),
        residual_distance_px=np.zeros(0),
        residuals_values=np.zeros((0, 2)),
        rms_px=None,
        rms_values=(None, None),
        loo_errors_px=None,
        loo_rms_px=None,
        loo_rms_by_transform={},
        outliers=np.zeros(0, dtype=bool),
        warnings=warnings,
    )
