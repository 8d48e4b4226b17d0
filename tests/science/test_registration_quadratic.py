"""The polynomial2 transform's blocked Newton inverse: starts, stopping rule, blocks and failures.

Reference for the preimages: scipy.optimize.root (MINPACK's hybrid Powell method, a general-purpose
reference library) solving the same equations point by point to its own tolerance. Round trips hold to
1e-9 px (the issue's calibration requirement); the solver's own tolerance is 1e-12 px.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from numpy.testing import assert_allclose
from numpy.typing import NDArray
from scipy.optimize import root

from tracedesk.science.quadratic_transform import (
    BLOCK_POINTS,
    QuadraticTransform,
    fit_quadratic_start,
    quadratic_monomials,
    quadratic_values,
    second_derivative_bound,
)
from tracedesk.science.registration import fit_transform

FloatArray = NDArray[np.float64]


def _bowed(rng: np.random.Generator, bend: float) -> tuple[QuadraticTransform, FloatArray]:
    """Control points on a 3000 x 2000 px sheet whose paper bows by about ``bend`` px at the corners."""
    pixels = np.column_stack([rng.uniform(100, 2900, 16), rng.uniform(100, 1900, 16)])
    u, v = pixels[:, 0], pixels[:, 1]
    chart = np.column_stack(
        [
            0.01 * (u + bend * (v / 2000.0) ** 2 + 0.3 * bend * u * v / 6e6),
            80.0 - 0.04 * (v - bend * (u / 3000.0) ** 2),
        ]
    )
    fitted = fit_transform(pixels, chart, name="polynomial2")
    assert isinstance(fitted, QuadraticTransform)
    return fitted, pixels


def _grid(count: int) -> FloatArray:
    return np.stack(np.meshgrid(np.linspace(0, 3000, count), np.linspace(0, 2000, count)), axis=-1).reshape(-1, 2)


def test_quadratic_values_match_the_monomials() -> None:
    """The nested evaluation equals the plain sum of coefficient x monomial (numpy matrix product)."""
    rng = np.random.default_rng(40)
    coefficients, points = rng.normal(size=(2, 6)), rng.normal(size=(50, 2))
    expected = quadratic_monomials(points) @ coefficients.T
    assert_allclose(np.column_stack(quadratic_values(coefficients, points[:, 0], points[:, 1])), expected, atol=1e-13)


def test_second_derivative_bound_is_attained_on_a_pure_square() -> None:
    """f = (3 u^2, 0): |H[e, e]| = 6 for e = (1, 0), and no unit e gives more."""
    coefficients = np.zeros((2, 6))
    coefficients[0, 3] = 3.0
    assert second_derivative_bound(coefficients) == pytest.approx(6.0, rel=1e-15)


@pytest.mark.parametrize("bend", [0.5, 5.0, 40.0])
def test_inverse_agrees_with_scipy_root(bend: float) -> None:
    rng = np.random.default_rng(41)
    fitted, _ = _bowed(rng, bend)
    probe = np.column_stack([rng.uniform(0, 3000, 60), rng.uniform(0, 2000, 60)])
    chart = fitted.pixels_to_chart(probe)
    solved = fitted.chart_to_pixels(chart)
    for point, target, ours in zip(probe, chart, solved, strict=True):

        def residual(p: FloatArray, target: FloatArray = target) -> FloatArray:
            return (fitted.pixels_to_chart(p.reshape(1, 2))[0] - target) / np.array([0.01, 0.04])

        reference = root(residual, point + 3.0, method="hybr", options={"xtol": 1e-13})
        # MINPACK may stop with "not making good progress" once the step is at round-off level (seen
        # with scipy 1.17); its point is then still a root to well below the 1e-9 px asked for.
        assert reference.success or float(np.max(np.abs(reference.fun))) < 1e-11
        assert_allclose(ours, reference.x, rtol=0, atol=1e-9)
        assert_allclose(ours, point, rtol=0, atol=1e-9)


def test_quadratic_start_is_closer_than_the_affine_start() -> None:
    """On a sheet bowing by 40 px the fitted inverse quadratic starts within a pixel everywhere."""
    fitted, _ = _bowed(np.random.default_rng(42), 40.0)
    grid = _grid(41)
    target = fitted.pixels_to_chart(grid)
    normalised = np.column_stack([target, np.ones(len(target))]) @ fitted.chart_normaliser.T
    pixel_scale = fitted.pixel_normaliser[0, 0]
    truth = (grid * pixel_scale) + fitted.pixel_normaliser[:2, 2]
    quadratic = np.column_stack(quadratic_values(fitted.quadratic_start, normalised[:, 0], normalised[:, 1]))
    affine = normalised @ fitted.affine_start.T
    quadratic_error = np.max(np.hypot(*(quadratic - truth).T)) / pixel_scale
    affine_error = np.max(np.hypot(*(affine[:, :2] - truth).T)) / pixel_scale
    assert affine_error > 10.0
    assert quadratic_error < 1.0
    assert quadratic_error < affine_error / 20.0


def test_a_map_onto_a_line_keeps_the_affine_start() -> None:
    """x = y = u sends the start grid onto one line: no quadratic inverse exists, the affine start stays."""
    coefficients = np.array([[0.0, 1.0, 0.0, 0.0, 0.0, 0.0], [0.0, 1.0, 0.0, 0.0, 0.0, 0.0]])
    affine = np.array([[2.0, 0.5, 0.1], [0.3, 4.0, -0.2], [0.0, 0.0, 1.0]])
    start = fit_quadratic_start(coefficients, np.array([[-1.0, -1.0], [1.0, 1.0]]), affine)
    assert_allclose(start, [[0.1, 2.0, 0.5, 0.0, 0.0, 0.0], [-0.2, 0.3, 4.0, 0.0, 0.0, 0.0]])


def test_blocks_do_not_change_the_answer() -> None:
    """Solving across block boundaries (and a partial last block) equals solving points one at a time."""
    fitted, _ = _bowed(np.random.default_rng(43), 20.0)
    rng = np.random.default_rng(44)
    pixels = np.column_stack([rng.uniform(0, 3000, 2 * BLOCK_POINTS + 37), rng.uniform(0, 2000, 2 * BLOCK_POINTS + 37)])
    chart = fitted.pixels_to_chart(pixels)
    together = fitted.chart_to_pixels(chart)
    picks = [0, BLOCK_POINTS - 1, BLOCK_POINTS, 2 * BLOCK_POINTS, len(pixels) - 1]
    alone = np.vstack([fitted.chart_to_pixels(chart[i : i + 1]) for i in picks])
    assert_allclose(together, pixels, rtol=0, atol=1e-9)
    assert_allclose(together[picks], alone, rtol=0, atol=1e-11)


def test_nan_and_unreachable_targets_fail_alone() -> None:
    """A fold (x = u^2 has no preimage for x < 0) and NaN give NaN; the rest of their block is solved.

    Chart x = (u / 1000)^2 + 1, y = v / 1000: values below x = 1 are reached by no pixel.
    """
    rng = np.random.default_rng(45)
    pixels = np.column_stack([rng.uniform(500, 2900, 12), rng.uniform(100, 1900, 12)])
    chart = np.column_stack([(pixels[:, 0] / 1000.0) ** 2 + 1.0, pixels[:, 1] / 1000.0])
    fitted = fit_transform(pixels, chart, name="polynomial2")
    probe = np.column_stack([rng.uniform(600, 2800, 500), rng.uniform(100, 1900, 500)])
    targets = fitted.pixels_to_chart(probe)
    targets[7] = (0.5, 1.0)  # below the fold
    targets[8] = (np.nan, 1.0)
    targets[9] = (np.inf, 1.0)
    solved = fitted.chart_to_pixels(targets)
    assert np.all(np.isnan(solved[7:10]))
    good = np.ones(len(probe), dtype=bool)
    good[7:10] = False
    assert_allclose(solved[good], probe[good], rtol=0, atol=1e-9)


def test_a_useless_quadratic_start_falls_back_to_the_affine_start() -> None:
    fitted, _ = _bowed(np.random.default_rng(46), 30.0)
    broken = dataclasses.replace(fitted, quadratic_start=np.full((2, 6), np.nan))
    grid = _grid(31)
    assert_allclose(broken.chart_to_pixels(fitted.pixels_to_chart(grid)), grid, rtol=0, atol=1e-9)


def test_large_pixel_coordinates_stop_at_float_resolution() -> None:
    """A 2 x 10^6 px-wide coordinate system: 1e-12 px is below float resolution there (eps x 2e6 = 4e-10 px)."""
    rng = np.random.default_rng(47)
    pixels = np.column_stack([rng.uniform(1e6, 3e6, 12), rng.uniform(1e6, 2e6, 12)])
    chart = np.column_stack([pixels[:, 0] * 1e-3 + 1e-10 * pixels[:, 1] ** 2, -pixels[:, 1] * 1e-3])
    fitted = fit_transform(pixels, chart, name="polynomial2")
    probe = np.column_stack([rng.uniform(1e6, 3e6, 300), rng.uniform(1e6, 2e6, 300)])
    assert_allclose(fitted.chart_to_pixels(fitted.pixels_to_chart(probe)), probe, rtol=0, atol=1e-7)
