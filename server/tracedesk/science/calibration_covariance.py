"""The calibration's own uncertainty, shared by every sample of a trace, as a low-rank covariance factor.

A calibration is fitted to a few clicked pixels (control points; the centre, time-zero pixel and ring
radii of a circular chart; the points clicked along one time line that give a pen arm). Their click errors
move the fitted mapping, and the moved mapping shifts every sample read through it together: a systematic
error, fully correlated along the trace. A fit absorbs it into its coefficients and leaves the residuals
unchanged, so no residual-based covariance can see it.

Propagation (JCGM 100:2008, GUM, 5.2, correlated quantities; first order as in 5.1.2): the ``m`` clicked
pixel coordinates ``q`` are independent with standard uncertainty ``s`` (px) each, and the values read at
sample pixel ``p_t`` are ``v_t = F(p_t; q)``. Then ``Cov(v) = G (s^2 I) G^T`` with ``G = dv / dq`` (value
units per px), which is returned as the factor ``L = s G`` of shape ``(n, m)``; the ``n x n`` matrix is
never formed (a trace can have 10^5 samples). ``G`` comes from refitting the calibration with each clicked
coordinate moved by ``+-h`` (central differences, GUM 5.1.3 note 2 allows numerical sensitivity
coefficients, from memory), with the transform pinned to the one chosen, so this holds for every kind of
calibration. For a least-squares transform it equals, to first order, the parameter covariance
``C_theta = s^2 (J^T J)^-1`` pushed through ``dv / dtheta``.

A pen arm clicked as ``pen_arc.time_line_points`` is refitted from its moved points like any other click
(its circle fit moves the pivot and the arm length); one typed as ``pivot_pixel`` + ``length_px`` is held
fixed and named in :attr:`CalibrationFactor.exact_inputs`, so a reader knows that part is not included.

``s`` is the control-point residual SD, ``sqrt(sum |r|^2 / dof)`` with ``dof`` the residual components
minus the transform's parameters. With no spare point (an exact fit, or a circular chart whose geometry is
not fitted) it is the pen-line floor the per-sample uncertainty uses,
``w / sqrt(12)`` (:func:`tracedesk.science.uncertainty.pixel_sigma` with no residual): a click is taken to
find a printed line no better than a trace finds the pen.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any, Final

import numpy as np
from numpy.typing import ArrayLike, NDArray

from tracedesk.science.calibration import ChartMapping, build_calibration
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.registration import ResidualReport, as_point_array
from tracedesk.science.uncertainty import pixel_sigma

FloatArray = NDArray[np.float64]
Path = tuple[str | int, ...]

# Parameters of each fitted pixel -> chart transform (chart_speed: the value gradient and its offset).
TRANSFORM_PARAMETERS: Final = {"similarity": 4, "affine": 6, "projective": 8, "polynomial2": 12, "chart_speed": 3}
# Residual components per control point: 1 across the value lines of a strip chart, else 2.
ONE_COMPONENT_TRANSFORMS: Final = frozenset({"chart_speed"})
DEFAULT_CLICK_STEP_PX: Final = 0.05
SOURCE_RESIDUALS: Final = "control_point_residuals"
SOURCE_LINE_FLOOR: Final = "line_width_floor"
# Degrees of freedom of the judged line-width floor: GUM G.4.2 gives nu = (1/2) (u / Delta u)^2 for a type B
# estimate known to a relative Delta u / u; the floor is judged good to about 25 % (nu = 8; from memory).
FLOOR_DOF: Final = 8.0
# Calibration kinds whose spec may carry a pen arm ("pen_arc").
PEN_ARC_KINDS: Final = frozenset({"circular", "curvilinear"})


@dataclass(frozen=True, eq=False)
class CalibrationFactor:
    """Factor of the samples' calibration covariance: ``Cov(x_s, y_t) = (X Y^T)[s, t]`` and so on.

    Attributes
    ----------
    x, y : ndarray, shape (n, m)
        ``s dv/dq`` for the x and y values of each sample (x and y units) per clicked coordinate.
    click_sigma_px : float
        ``s``, the standard uncertainty of one clicked coordinate (px).
    source : str
        ``"control_point_residuals"`` or ``"line_width_floor"`` (how ``s`` was found).
    exact_inputs : tuple of str
        Top-level spec fields taken as exact, so no column stands for them: ``("pen_arc",)`` when the pen
        arm is typed as ``pivot_pixel`` + ``length_px`` (e.g. from an instrument drawing), empty otherwise.
        An arm given as ``time_line_points`` is clicked, and its points have columns like any click.
    dof : float
        Degrees of freedom of ``s`` (infinity when unknown): for the Welch-Satterthwaite band factors.
    """

    x: FloatArray
    y: FloatArray
    click_sigma_px: float
    source: str
    exact_inputs: tuple[str, ...] = ()
    dof: float = math.inf

    def take(self, index: NDArray[np.intp] | NDArray[np.bool_]) -> CalibrationFactor:
        """The rows of the samples ``index`` selects (a mask or an order), e.g. finite samples sorted by x."""
        return CalibrationFactor(
            self.x[index], self.y[index], self.click_sigma_px, self.source, self.exact_inputs, self.dof
        )


def click_sigma(report: ResidualReport, *, line_width_px: float) -> tuple[float, str, float]:
    """``s`` (px), its source and its degrees of freedom: the residual SD of the control points (with the
    residual components minus the transform's parameters), or the line-width floor (:data:`FLOOR_DOF`)."""
    parameters = TRANSFORM_PARAMETERS.get(report.transform)
    per_point = 1 if report.transform in ONE_COMPONENT_TRANSFORMS else 2
    dof = per_point * report.residuals_px.shape[0] - (parameters or 0)
    if parameters is not None and dof >= 1:
        spread = math.sqrt(float(np.sum(report.residuals_px**2)) / dof)
        if math.isfinite(spread):
            return spread, SOURCE_RESIDUALS, float(dof)
    return pixel_sigma(calibration_rms_px=0.0, line_width_px=line_width_px), SOURCE_LINE_FLOOR, FLOOR_DOF


def _pen_arc(spec: Mapping[str, Any]) -> Mapping[str, Any] | None:
    """The ``pen_arc`` of the kinds that use one (circular, curvilinear), else None."""
    arc = spec.get("pen_arc") if spec.get("kind") in PEN_ARC_KINDS else None
    return arc if isinstance(arc, Mapping) else None


def clicked_inputs(spec: Mapping[str, Any]) -> list[Path]:
    """Paths (into the JSON spec) of every clicked pixel coordinate the calibration is fitted from."""
    paths: list[Path] = []
    if spec.get("kind") == "circular":
        paths += [("centre", 0), ("centre", 1), ("time_zero_pixel", 0), ("time_zero_pixel", 1)]
        paths += [("value_axis", "radius_min_px"), ("value_axis", "radius_max_px")]
    else:
        for index in range(len(spec.get("control_points") or [])):
            paths += [("control_points", index, "pixel", 0), ("control_points", index, "pixel", 1)]
    if spec.get("kind") == "strip_speed":
        paths += [("time_zero_pixel", 0), ("time_zero_pixel", 1)]
    arc = _pen_arc(spec)
    for index in range(len((arc or {}).get("time_line_points") or [])):
        paths += [("pen_arc", "time_line_points", index, 0), ("pen_arc", "time_line_points", index, 1)]
    return paths


def exact_inputs(spec: Mapping[str, Any]) -> tuple[str, ...]:
    """Top-level spec fields the factor takes as exact: a pen arm typed as pivot and length."""
    arc = _pen_arc(spec)
    return ("pen_arc",) if arc is not None and arc.get("time_line_points") is None else ()


def _thawed(obj: Any) -> Any:
    """A deep copy of a JSON-like object with tuples as lists (so any entry can be replaced)."""
    if isinstance(obj, Mapping):
        return {key: _thawed(value) for key, value in obj.items()}
    if isinstance(obj, list | tuple):
        return [_thawed(value) for value in obj]
    return obj


def _moved(spec: Mapping[str, Any], path: Path, shift_px: float) -> dict[str, Any]:
    copy: dict[str, Any] = _thawed(spec)
    container: Any = copy
    for key in path[:-1]:
        container = container[key]
    container[path[-1]] = float(container[path[-1]]) + shift_px
    return copy


def _pinned(spec: Mapping[str, Any], mapping: ChartMapping) -> dict[str, Any]:
    """The spec with the transform the calibration chose, so a moved click cannot switch the model."""
    pinned: dict[str, Any] = _thawed(spec)
    if pinned.get("kind") in ("cartesian", "curvilinear"):
        pinned["transform"] = mapping.residual_report.transform
    return pinned


def calibration_factor(
    spec: Mapping[str, Any],
    mapping: ChartMapping,
    pixels: ArrayLike,
    *,
    line_width_px: float,
    step_px: float = DEFAULT_CLICK_STEP_PX,
    build: Callable[[Mapping[str, Any]], ChartMapping] = build_calibration,
) -> CalibrationFactor:
    """Covariance factor of the values read at ``pixels`` from the calibration's click uncertainty.

    Parameters
    ----------
    spec : mapping
        The calibration's JSON description (as :func:`~tracedesk.science.calibration.build_calibration` takes).
    mapping : ChartMapping
        The calibration built from ``spec``.
    pixels : array_like, shape (n, 2)
        Sample pixels (px).
    line_width_px : float
        Pen line width (px), for the floor of ``s``.
    step_px : float
        Central-difference step for each clicked coordinate (px), > 0.
    build : callable
        Calibration builder (the default is the JSON one).

    Returns
    -------
    CalibrationFactor
        Columns per clicked coordinate; NaN rows where a sample has no value.

    Raises
    ------
    ScienceInputError
        A bad step, or a calibration that cannot be refitted with a click moved by ``step_px``.
    """
    if not math.isfinite(step_px) or step_px <= 0.0:
        raise ScienceInputError(f"step_px: must be a finite number > 0, got {step_px!r}")
    uv = as_point_array(pixels, field="pixels")
    sigma, source, dof = click_sigma(mapping.residual_report, line_width_px=line_width_px)
    base = _pinned(spec, mapping)
    paths = clicked_inputs(base)
    columns = np.empty((uv.shape[0], 2, len(paths)))
    for column, path in enumerate(paths):
        plus = build(_moved(base, path, step_px)).pixels_to_values(uv)
        minus = build(_moved(base, path, -step_px)).pixels_to_values(uv)
        columns[:, :, column] = _wrapped(plus - minus, mapping.x_period_hours) / (2.0 * step_px)
    columns *= sigma
    return CalibrationFactor(columns[:, 0, :], columns[:, 1, :], sigma, source, exact_inputs(base), dof)


def _wrapped(difference: FloatArray, period: float | None) -> FloatArray:
    """Differences of a cyclic x (circular charts) taken across the wrap."""
    if period is not None:
        difference[:, 0] = np.mod(difference[:, 0] + 0.5 * period, period) - 0.5 * period
    return difference
