"""Resampling onto uniform grids: values from reference interpolators, gaps and range as NaN with flags.

References: numpy.interp and scipy.interpolate.PchipInterpolator (general-purpose reference libraries);
hand-made traces whose gaps and range are known.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.interpolate import PchipInterpolator

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fitting import fit_model
from tracedesk.science.resampling import resample_fit, resample_samples, uniform_grid

TRACE_X = np.array([0.0, 1.0, 2.0, 5.0, 6.0, 7.0])
TRACE_Y = np.array([0.0, 1.0, 0.5, 3.0, 4.0, 3.5])


def test_uniform_grid_by_step_and_by_count() -> None:
    """Step grids include the stop when it lies on the grid; count grids include both ends."""
    assert_allclose(uniform_grid(start=0.0, stop=1.0, step=0.1), np.linspace(0.0, 1.0, 11), atol=1e-15)
    assert_allclose(uniform_grid(start=0.0, stop=1.0, step=0.3), [0.0, 0.3, 0.6, 0.9], atol=1e-15)
    assert_allclose(uniform_grid(start=2.0, stop=4.0, count=5), [2.0, 2.5, 3.0, 3.5, 4.0])
    assert uniform_grid(start=0.0, stop=24.0, step=1.0 / 60).size == 24 * 60 + 1
    with pytest.raises(ScienceInputError, match="exactly one of step or count"):
        uniform_grid(start=0.0, stop=1.0)
    with pytest.raises(ScienceInputError, match="step must be positive"):
        uniform_grid(start=0.0, stop=1.0, step=-0.1)


def test_linear_resampling_matches_numpy_interp_and_marks_gaps() -> None:
    """Inside stretches the values are numpy.interp's; the 2 -> 5 span (longer than max_gap) is NaN."""
    grid = uniform_grid(start=-1.0, stop=8.0, step=0.25)
    series = resample_samples(TRACE_X, TRACE_Y, grid=grid, max_gap=2.0)
    inside = (grid >= 0) & (grid <= 7) & ~((grid > 2) & (grid < 5))
    assert_allclose(series.y[inside], np.interp(grid[inside], TRACE_X, TRACE_Y))
    assert np.all(np.isnan(series.y[~inside]))
    assert series.gap.tolist() == ((grid > 2) & (grid < 5)).tolist()
    assert series.outside.tolist() == ((grid < 0) | (grid > 7)).tolist()
    # Without max_gap the long span is bridged.
    bridged = resample_samples(TRACE_X, TRACE_Y, grid=np.array([3.5]))
    assert bridged.y[0] == pytest.approx(1.75)


def test_pchip_runs_on_each_stretch_separately() -> None:
    """PCHIP values equal SciPy's PchipInterpolator built on the samples of each gap-free stretch."""
    grid = uniform_grid(start=0.0, stop=7.0, step=0.1)
    series = resample_samples(TRACE_X, TRACE_Y, grid=grid, method="pchip", max_gap=2.0)
    first = grid <= 2.0
    second = grid >= 5.0
    assert_allclose(series.y[first], PchipInterpolator(TRACE_X[:3], TRACE_Y[:3])(grid[first]), rtol=1e-12)
    assert_allclose(series.y[second], PchipInterpolator(TRACE_X[3:], TRACE_Y[3:])(grid[second]), rtol=1e-12)


@settings(max_examples=30, deadline=None)
@given(st.lists(st.floats(min_value=-100, max_value=100), min_size=3, max_size=30))
def test_pchip_never_leaves_the_range_of_its_neighbours(values: list[float]) -> None:
    """Shape preservation (Fritsch & Carlson 1980): no value beyond the two samples around it."""
    y = np.array(values)
    x = np.arange(y.size, dtype=float)
    grid = np.linspace(0.0, y.size - 1.0, 7 * y.size)
    series = resample_samples(x, y, grid=grid, method="pchip")
    left = np.clip(np.floor(grid).astype(int), 0, y.size - 2)
    low = np.minimum(y[left], y[left + 1])
    high = np.maximum(y[left], y[left + 1])
    assert np.all(series.y >= low - 1e-9 * (1 + np.abs(low)))
    assert np.all(series.y <= high + 1e-9 * (1 + np.abs(high)))


def test_duplicates_are_averaged_or_refused() -> None:
    """Two samples at the same x become their mean; or the caller asks to refuse them."""
    x = np.array([0.0, 1.0, 1.0, 2.0])
    y = np.array([0.0, 1.0, 3.0, 2.0])
    assert resample_samples(x, y, grid=np.array([1.0])).y[0] == 2.0
    with pytest.raises(ScienceInputError, match="x repeats at index 2"):
        resample_samples(x, y, grid=np.array([1.0]), duplicates="refuse")
    with pytest.raises(ScienceInputError, match="sorted by x"):
        resample_samples([0.0, 2.0, 1.0], [0.0, 1.0, 2.0], grid=np.array([1.0]))


def test_fit_resampling_is_nan_outside_the_domain_and_in_gaps() -> None:
    """A fitted model is not evaluated beyond the traced range or across gaps of its samples."""
    fit = fit_model(TRACE_X, TRACE_Y, family="polynomial", degree=1)
    grid = np.array([-1.0, 0.0, 3.0, 6.0, 8.0])
    series = resample_fit(fit, grid=grid, sample_x=TRACE_X, max_gap=2.0)
    assert np.isnan(series.y).tolist() == [True, False, True, False, True]
    assert series.y[1] == pytest.approx(fit.predict(np.array([0.0]))[0])
    plain = resample_fit(fit, grid=grid)
    assert np.isnan(plain.y).tolist() == [True, False, False, False, True]
    with pytest.raises(ScienceInputError, match="sample_x"):
        resample_fit(fit, grid=grid, max_gap=2.0)
