"""The calibration's shared error in a fit's coefficient covariance.

Propagation of correlated input quantities: JCGM 100:2008 (GUM), section 5.2. Each simulated chart is
calibrated from 9 clicked grid crossings whose clicks carry known pixel noise, re-drawn every run, so the
calibration error is shared by all samples of that run's trace; the truth must lie within 2 total standard
errors in at least 85 % of runs (nominal 95 % for a normal error), and clearly less often without the term.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tracedesk.science.calibration import build_calibration
from tracedesk.science.calibration_covariance import (
    SOURCE_LINE_FLOOR,
    SOURCE_RESIDUALS,
    CalibrationFactor,
    calibration_factor,
)
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fitting import fit_model
from tracedesk.science.uncertainty import value_uncertainty_for

FloatArray = np.ndarray
CLICK_NOISE_PX = 0.3
LINE_WIDTH_PX = 2.0
RUNS = 100


def _pixels(x: FloatArray, y: FloatArray, *, log: bool) -> FloatArray:
    """The true chart: 80 px per hour from u = 100, 200 px per unit (or decade) up from v = 860."""
    chart_y = np.log10(y) if log else y
    return np.column_stack([100.0 + 80.0 * x, 860.0 - 200.0 * chart_y])


def _spec(rng: np.random.Generator, *, log: bool, transform: str = "affine") -> dict[str, Any]:
    levels = (1.0, 100.0, 10000.0) if log else (0.0, 2.0, 4.0)
    grid = np.array([(x, y) for x in (0.0, 6.0, 12.0) for y in levels])
    clicks = _pixels(grid[:, 0], grid[:, 1], log=log) + rng.normal(0.0, CLICK_NOISE_PX, grid.shape)
    return {
        "kind": "cartesian",
        "x_axis": {"scale": "time"},
        "y_axis": {"scale": "log10" if log else "linear"},
        "control_points": [{"pixel": p.tolist(), "value": v.tolist()} for p, v in zip(clicks, grid, strict=True)],
        "transform": transform,
    }


def _coverage(
    truth: Callable[[FloatArray], FloatArray], parameters: dict[Any, float], *, log: bool, family: str, **options: Any
) -> tuple[dict[Any, float], dict[Any, float]]:
    """Fraction of runs with the truth within 2 SE: (with the calibration term, without it)."""
    rng = np.random.default_rng(20260)
    inside = {True: dict.fromkeys(parameters, 0), False: dict.fromkeys(parameters, 0)}
    for _ in range(RUNS):
        spec = _spec(rng, log=log)
        mapping = build_calibration(spec)
        hours = np.linspace(0.2, 11.8, 240)
        # The pen traced exactly, plus a little independent vertex noise (so the residual term is not zero).
        pixels = _pixels(hours, truth(hours), log=log) + rng.normal(0.0, 0.1, (hours.size, 2))
        values = mapping.pixels_to_values(pixels)
        sigma = value_uncertainty_for(mapping, pixels, line_width_px=LINE_WIDTH_PX)[:, 1]
        factor = calibration_factor(spec, mapping, pixels, line_width_px=LINE_WIDTH_PX)
        for with_term in (True, False):
            fit = fit_model(
                values[:, 0],
                values[:, 1],
                family=family,
                sigma=sigma,
                calibration=factor if with_term else None,
                **options,
            )
            for key, true_value in parameters.items():
                inside[with_term][key] += abs(fit.parameters[key] - true_value) <= 2.0 * fit.standard_errors[key]
    return (
        {key: count / RUNS for key, count in inside[True].items()},
        {key: count / RUNS for key, count in inside[False].items()},
    )


def test_straight_line_coverage_needs_the_calibration_term() -> None:
    with_term, without = _coverage(
        lambda x: 0.5 + 0.25 * x, {0: 0.5, 1: 0.25}, log=False, family="polynomial", degree=1
    )
    assert min(with_term.values()) >= 0.85, with_term
    # Without the term the shared error is invisible: the residual-based SE alone covers far less often.
    assert max(without.values()) < 0.6, without


def test_exponential_on_a_log_axis_coverage_needs_the_calibration_term() -> None:
    with_term, without = _coverage(
        lambda x: 8000.0 * np.exp(-0.45 * x) + 20.0,
        {"a": 8000.0, "b": -0.45, "c": 20.0},
        log=True,
        family="exponential",
    )
    assert min(with_term.values()) >= 0.85, with_term
    assert without["a"] < 0.6 and without["b"] < 0.75, without


def test_factor_at_the_centroid_is_the_mean_of_the_clicks() -> None:
    """At the control points' centroid an affine fit's value error is the mean click error: s / sqrt(n) px.

    Variance of a least-squares prediction at the regressors' mean is sigma^2 / n (common practice).
    """
    spec = _spec(np.random.default_rng(3), log=False)
    mapping = build_calibration(spec)
    centroid = np.mean([point["pixel"] for point in spec["control_points"]], axis=0)
    factor = calibration_factor(spec, mapping, centroid[None, :], line_width_px=LINE_WIDTH_PX)
    assert factor.source == SOURCE_RESIDUALS
    expected_y = factor.click_sigma_px / math.sqrt(9) / 200.0  # 200 px per unit
    assert float(np.sqrt(np.sum(factor.y**2))) == pytest.approx(expected_y, rel=1e-3)
    assert float(np.sqrt(np.sum(factor.x**2))) == pytest.approx(factor.click_sigma_px / 3.0 / 80.0, rel=1e-3)


def test_exact_calibration_uses_the_line_width_floor() -> None:
    """Two points fit a similarity exactly: s is w / sqrt(12), a rectangular distribution (GUM 4.3.7)."""
    spec = {
        "kind": "cartesian",
        "x_axis": {"scale": "linear"},
        "y_axis": {"scale": "linear"},
        "control_points": [
            {"pixel": [100.0, 800.0], "value": [0.0, 0.0]},
            {"pixel": [900.0, 0.0], "value": [8.0, 8.0]},
        ],
    }
    mapping = build_calibration(spec)
    factor = calibration_factor(spec, mapping, [[500.0, 400.0]], line_width_px=3.0)
    assert factor.source == SOURCE_LINE_FLOOR
    assert factor.click_sigma_px == pytest.approx(3.0 / math.sqrt(12.0))


def test_a_common_offset_moves_every_spline_coefficient_and_only_the_intercept_of_a_line() -> None:
    x = np.linspace(0.0, 10.0, 50)
    y = np.sin(x)
    factor = CalibrationFactor(np.zeros((50, 2)), np.full((50, 2), 0.01), 0.2, SOURCE_RESIDUALS)
    spline = fit_model(x, y, family="spline", calibration=factor)
    # A smoothing spline reproduces a constant (its penalty acts on the second derivative only), so each
    # offset column moves every B-spline coefficient by 0.01 (B-splines sum to one).
    assert spline.calibration_covariance is not None
    size = spline.calibration_covariance.shape[0]
    assert_allclose(spline.calibration_covariance, np.full((size, size), 2 * 0.01**2), rtol=1e-6)
    line = fit_model(x, 1.0 + 0.5 * x, family="polynomial", degree=1, calibration=factor)
    # A pure common offset of 0.01 * sqrt(2) moves only the intercept, by exactly that much (exact data).
    assert line.standard_errors[0] == pytest.approx(0.01 * math.sqrt(2.0), rel=1e-9)
    assert line.stats["calibration_share"] == pytest.approx(1.0)


def test_factor_rows_must_match_the_samples() -> None:
    factor = CalibrationFactor(np.zeros((3, 1)), np.zeros((3, 1)), 0.2, SOURCE_RESIDUALS)
    with pytest.raises(ScienceInputError, match="calibration factor has 3 rows"):
        fit_model(np.arange(5.0), np.arange(5.0), family="polynomial", degree=1, calibration=factor)


# --- A pen arm clicked along one time line (pen_arc.time_line_points) ---------------------------------------

ARM_PX = 1000.0  # arm length L = pivot distance D, so phi(r) = arccos(r / 2L) (Walter et al. 1999)
ARM_CENTRE = np.array([1000.5, 1000.5])
ARM_PIVOT = ARM_CENTRE + ARM_PX * np.array([math.cos(math.radians(-60.0)), math.sin(math.radians(-60.0))])
ARM_ZERO_ANGLE = math.radians(-60.0) - math.acos(900.0 / (2.0 * ARM_PX))
ARM_ZERO = ARM_CENTRE + 900.0 * np.array([math.cos(ARM_ZERO_ANGLE), math.sin(ARM_ZERO_ANGLE)])


def _time_zero_arc_clicks() -> tuple[FloatArray, FloatArray]:
    """5 pixels along the time-zero arc (0 to 40 deg of arm swing inwards), +-0.3 px off it in turn, and the
    arc's outward unit normals there (from the pivot)."""
    towards_zero = math.atan2(*(ARM_ZERO - ARM_PIVOT)[::-1])
    swing = towards_zero - np.radians([0.0, 10.0, 20.0, 30.0, 40.0])
    normals = np.column_stack([np.cos(swing), np.sin(swing)])
    return ARM_PIVOT + (ARM_PX + 0.3 * np.array([1.0, -1.0, 1.0, -1.0, 1.0]))[:, None] * normals, normals


def _arm_chart(arm: str) -> dict[str, Any]:
    """Daily chart, 0..100 linear from r = 100 to 900 px, time zero where the pen arc meets the 900 px ring;
    the arm ``"typed"`` (pivot + length) or ``"clicked"`` (along the time-zero arc)."""
    pen_arc: dict[str, Any] = {"pivot_pixel": ARM_PIVOT.tolist(), "length_px": ARM_PX}
    if arm == "clicked":
        pen_arc = {"time_line_points": _time_zero_arc_clicks()[0].tolist()}
    return {
        "kind": "circular",
        "centre": ARM_CENTRE.tolist(),
        "value_axis": {"scale": "linear", "min": 0.0, "max": 100.0, "radius_min_px": 100.0, "radius_max_px": 900.0},
        "period_hours": 24.0,
        "time_zero_pixel": ARM_ZERO.tolist(),
        "time_direction": "clockwise",
        "pen_arc": pen_arc,
    }


def _arm_samples(mapping: Any) -> FloatArray:
    """Pen pixels at 1.5 .. 22.5 h on the 20 / 50 / 80 rings (away from time zero), then time zero itself."""
    values = np.array([(hours, value) for hours in (1.5, 7.5, 13.5, 22.5) for value in (20.0, 50.0, 80.0)])
    return np.vstack([mapping.values_to_pixels(values), ARM_ZERO[None, :]])


def test_typed_pen_arm_is_held_exact_and_said_so() -> None:
    spec = _arm_chart("typed")
    mapping = build_calibration(spec)
    factor = calibration_factor(spec, mapping, _arm_samples(mapping), line_width_px=LINE_WIDTH_PX)
    assert factor.x.shape == (13, 6)  # centre, time zero, two ring radii: the arm has no column
    assert factor.exact_inputs == ("pen_arc",)
    assert factor.take(np.array([2, 0])).exact_inputs == ("pen_arc",)
    radial = {key: value for key, value in spec.items() if key != "pen_arc"}
    assert calibration_factor(radial, build_calibration(radial), [[500.0, 500.0]], line_width_px=2.0).exact_inputs == ()


def test_clicked_pen_arm_adds_two_columns_per_time_line_point() -> None:
    """Moving a clicked point moves the fitted arm, which turns the time lines about time zero: the arc through
    time_zero_pixel always meets it (circular.py), so time there cannot move, and the value is the radius alone."""
    spec = _arm_chart("clicked")
    mapping = build_calibration(spec)
    factor = calibration_factor(spec, mapping, _arm_samples(mapping), line_width_px=LINE_WIDTH_PX)
    assert factor.x.shape == (13, 6 + 2 * 5)
    assert factor.exact_inputs == ()
    arm_x, arm_y = factor.x[:, 6:], factor.y[:, 6:]
    assert np.all(np.linalg.norm(arm_x[:-1], axis=1) > 1e-4)  # hours per clicked sigma, away from time zero
    np.testing.assert_allclose(arm_x[-1], 0.0, atol=1e-9)
    np.testing.assert_allclose(arm_y, 0.0, atol=1e-9)


def test_clicked_arm_column_predicts_a_refit_with_the_points_moved() -> None:
    """All time-line points moved by s along the arc's normal: the refitted chart reads times shifted by the
    factor's prediction, sum_k X[:, k] n_k, to first order (GUM 5.1.2; the refit is independent of the factor)."""
    spec = _arm_chart("clicked")
    mapping = build_calibration(spec)
    samples = _arm_samples(mapping)[:-1]
    factor = calibration_factor(spec, mapping, samples, line_width_px=LINE_WIDTH_PX)
    points, normals = _time_zero_arc_clicks()
    moved = {**spec, "pen_arc": {"time_line_points": (points + factor.click_sigma_px * normals).tolist()}}
    change = build_calibration(moved).pixels_to_values(samples)[:, 0] - mapping.pixels_to_values(samples)[:, 0]
    change = np.mod(change + 12.0, 24.0) - 12.0  # across the wrap of a 24 h chart
    predicted = factor.x[:, 6:] @ normals.reshape(-1)
    assert np.min(np.abs(change)) > 1e-4  # hours: the check below could fail
    np.testing.assert_allclose(predicted, change, rtol=2e-3, atol=0.0)  # second order: about s / L


def test_clicked_pen_arm_of_a_drum_chart_adds_its_columns() -> None:
    """Drum chart (pivot at v = 600.5, L = 1500 px, later side): samples away from the clicked 12 h line move."""
    rng = np.random.default_rng(11)
    arm = 1500.0

    def drum(hours: FloatArray, value: FloatArray) -> FloatArray:
        v = 1100.5 - 10.0 * value
        return np.column_stack([200.5 + 100.0 * hours + arm - np.sqrt(arm**2 - (v - 600.5) ** 2), v])

    grid = np.array([(t, y) for t in (0.0, 8.0, 16.0, 24.0) for y in (0.0, 30.0, 70.0, 100.0)])
    clicks = drum(grid[:, 0], grid[:, 1]) + rng.normal(0.0, CLICK_NOISE_PX, grid.shape)
    line = drum(np.full(4, 12.0), np.array([-10.0, 30.0, 70.0, 110.0]))
    spec = {
        "kind": "curvilinear",
        "x_axis": {"scale": "time"},
        "y_axis": {"scale": "linear"},
        "control_points": [{"pixel": p.tolist(), "value": v.tolist()} for p, v in zip(clicks, grid, strict=True)],
        "transform": "affine",
        "pen_arc": {"time_line_points": line.tolist(), "pivot_side": "later"},
    }
    mapping = build_calibration(spec)
    samples = drum(np.array([4.0, 20.0]), np.array([5.0, 95.0]))
    factor = calibration_factor(spec, mapping, samples, line_width_px=LINE_WIDTH_PX)
    assert factor.source == SOURCE_RESIDUALS
    assert factor.x.shape == (2, 2 * 16 + 2 * 4)
    assert factor.exact_inputs == ()
    assert np.all(np.linalg.norm(factor.x[:, 32:], axis=1) > 1e-4)
