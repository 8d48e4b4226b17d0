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


def test_spline_is_left_without_the_term_and_share_is_reported() -> None:
    x = np.linspace(0.0, 10.0, 50)
    y = np.sin(x)
    factor = CalibrationFactor(np.zeros((50, 2)), np.full((50, 2), 0.01), 0.2, SOURCE_RESIDUALS)
    assert fit_model(x, y, family="spline", calibration=factor).stats["calibration_share"] is None
    line = fit_model(x, 1.0 + 0.5 * x, family="polynomial", degree=1, calibration=factor)
    # A pure common offset of 0.01 * sqrt(2) moves only the intercept, by exactly that much (exact data).
    assert line.standard_errors[0] == pytest.approx(0.01 * math.sqrt(2.0), rel=1e-9)
    assert line.stats["calibration_share"] == pytest.approx(1.0)


def test_factor_rows_must_match_the_samples() -> None:
    factor = CalibrationFactor(np.zeros((3, 1)), np.zeros((3, 1)), 0.2, SOURCE_RESIDUALS)
    with pytest.raises(ScienceInputError, match="calibration factor has 3 rows"):
        fit_model(np.arange(5.0), np.arange(5.0), family="polynomial", degree=1, calibration=factor)
