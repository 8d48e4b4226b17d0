"""Registration: transforms fitted to control points, checked against scikit-image and numpy.

scikit-image's ``skimage.transform`` (general-purpose reference library named in REFERENCES.md) estimates
the same models from the same points: SimilarityTransform (Umeyama least squares), ProjectiveTransform
(normalised DLT, same Hartley normalisation), AffineTransform and PolynomialTransform (total least
squares, so compared on exact data; on noisy data ordinary least squares is checked with numpy.linalg.lstsq).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from numpy.typing import NDArray
from skimage.transform import AffineTransform, PolynomialTransform, ProjectiveTransform, SimilarityTransform

from tracedesk.science.axes import LinearScale
from tracedesk.science.calibration import CartesianCalibration, calibrate_cartesian
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.quadratic_transform import QuadraticTransform, quadratic_monomials
from tracedesk.science.registration import (
    TRANSFORM_MIN_POINTS,
    TRANSFORM_NAMES,
    MatrixTransform,
    fit_transform,
    inspect_control_points,
)

FloatArray = NDArray[np.float64]


def _pixels(rng: np.random.Generator, n: int) -> FloatArray:
    return np.column_stack([rng.uniform(100, 2900, n), rng.uniform(100, 1900, n)])


def _homography(matrix: FloatArray, points: FloatArray) -> FloatArray:
    h = np.column_stack([points, np.ones(len(points))]) @ matrix.T
    return h[:, :2] / h[:, 2:]


def _truth(name: str, rng: np.random.Generator) -> tuple[FloatArray, FloatArray]:
    """A random well-conditioned truth for ``name``: a 3x3 matrix, or (2, 6) raw polynomial coefficients."""
    angle, scale = rng.uniform(-0.2, 0.2), rng.uniform(0.01, 0.1)
    rotation = scale * np.array([[np.cos(angle), -np.sin(angle)], [np.sin(angle), np.cos(angle)]])
    matrix = np.eye(3)
    matrix[:2, :2] = (
        rotation @ np.diag([1.0, -1.0]) if name == "similarity" else rotation @ np.diag(rng.uniform(0.3, 3, 2))
    )
    matrix[:2, 2] = rng.uniform(-50, 50, 2)
    if name == "affine":
        matrix[0, 1] += rng.uniform(-0.02, 0.02)
    if name == "projective":
        matrix[2, :2] = rng.uniform(-1.5e-4, 1.5e-4, 2)
    quadratic = np.zeros((2, 6))
    quadratic[:, :3] = np.column_stack([matrix[:2, 2], matrix[:2, :2]])
    quadratic[:, 3:] = rng.uniform(-3e-6, 3e-6, (2, 3)) * scale * 10
    return matrix, quadratic


def _apply_truth(name: str, truth: tuple[FloatArray, FloatArray], pixels: FloatArray) -> FloatArray:
    if name == "polynomial2":
        return quadratic_monomials(pixels) @ truth[1].T
    return _homography(truth[0], pixels)


def _calibrate(pixels: FloatArray, chart: FloatArray, transform: str = "auto") -> CartesianCalibration:
    return calibrate_cartesian(pixels, chart, x_axis=LinearScale(), y_axis=LinearScale(), transform=transform)


def _unit(matrix: FloatArray) -> FloatArray:
    return matrix / matrix[2, 2]


def test_similarity_matches_scikit_image_on_noisy_points() -> None:
    rng = np.random.default_rng(11)
    pixels = _pixels(rng, 12)
    truth = SimilarityTransform(scale=0.05, rotation=0.3, translation=(4.0, -7.0))
    chart = truth(pixels) + rng.normal(0, 0.02, (12, 2))
    reference = SimilarityTransform.from_estimate(pixels, chart)
    fitted = fit_transform(pixels, chart, name="similarity")
    assert isinstance(fitted, MatrixTransform)
    assert_allclose(_unit(fitted.forward_matrix), reference.params, rtol=1e-9, atol=1e-12)


def test_reflected_similarity_matches_scikit_image_on_flipped_pixels() -> None:
    """Chart y up, image v down: a reflection. scikit-image fits proper similarities, so flip v first."""
    rng = np.random.default_rng(12)
    pixels = _pixels(rng, 10)
    chart = np.column_stack([0.01 * pixels[:, 0] + 3, -0.01 * pixels[:, 1] + 20]) + rng.normal(0, 1e-3, (10, 2))
    reference = SimilarityTransform.from_estimate(pixels * (1.0, -1.0), chart).params @ np.diag([1.0, -1.0, 1.0])
    fitted = fit_transform(pixels, chart, name="similarity")
    assert isinstance(fitted, MatrixTransform)
    assert_allclose(fitted.forward_matrix, reference, rtol=1e-9, atol=1e-12)


def test_two_point_similarity_takes_the_upright_orientation() -> None:
    """Two points fit proper and reflected similarities exactly; chart y up on an upright scan wins."""
    pixels = np.array([[100.0, 900.0], [900.0, 100.0]])
    chart = np.array([[0.0, 0.0], [8.0, 8.0]])
    calibration = _calibrate(pixels, chart)
    assert calibration.residual_report.transform == "similarity"
    assert_allclose(
        calibration.pixels_to_values([[500.0, 500.0], [100.0, 100.0]]), [[4.0, 4.0], [0.0, 8.0]], atol=1e-12
    )


def test_affine_matches_scikit_image_on_exact_points() -> None:
    rng = np.random.default_rng(13)
    pixels = _pixels(rng, 9)
    truth = AffineTransform(matrix=np.array([[0.02, 0.001, -3.0], [0.0005, -0.05, 90.0], [0, 0, 1]]))
    chart = truth(pixels)
    reference = AffineTransform.from_estimate(pixels, chart)
    fitted = fit_transform(pixels, chart, name="affine")
    assert isinstance(fitted, MatrixTransform)
    assert_allclose(fitted.forward_matrix, reference.params, rtol=1e-9, atol=1e-12)


def test_affine_is_ordinary_least_squares_on_noisy_points() -> None:
    """Reference: numpy.linalg.lstsq of [u v 1] against each chart coordinate."""
    rng = np.random.default_rng(14)
    pixels = _pixels(rng, 15)
    chart = pixels @ np.array([[0.02, 0.001], [0.0005, -0.05]]).T + (3.0, 90.0) + rng.normal(0, 0.05, (15, 2))
    design = np.column_stack([pixels, np.ones(15)])
    reference = np.linalg.lstsq(design, chart, rcond=None)[0].T
    fitted = fit_transform(pixels, chart, name="affine")
    assert isinstance(fitted, MatrixTransform)
    assert_allclose(fitted.forward_matrix[:2], reference, rtol=1e-9, atol=1e-12)


def test_projective_matches_scikit_image_on_noisy_points() -> None:
    rng = np.random.default_rng(15)
    pixels = _pixels(rng, 14)
    truth = np.array([[0.02, 0.002, -3.0], [0.001, -0.04, 90.0], [4e-5, -3e-5, 1.0]])
    chart = _homography(truth, pixels) + rng.normal(0, 0.01, (14, 2))
    reference = ProjectiveTransform.from_estimate(pixels, chart)
    fitted = fit_transform(pixels, chart, name="projective")
    assert isinstance(fitted, MatrixTransform)
    assert_allclose(_unit(fitted.forward_matrix), reference.params, rtol=1e-8, atol=1e-12)


def test_polynomial2_matches_scikit_image_on_exact_points() -> None:
    rng = np.random.default_rng(16)
    pixels = _pixels(rng, 12)
    coefficients = np.array([[1.0, 0.01, 0.002, 1e-6, -2e-6, 3e-7], [50.0, 0.001, -0.03, -4e-7, 1e-6, 2e-6]])
    chart = quadratic_monomials(pixels) @ coefficients.T
    reference = PolynomialTransform.from_estimate(pixels, chart, order=2)
    fitted = fit_transform(pixels, chart, name="polynomial2")
    probe = _pixels(rng, 50)
    # scikit-image solves on raw monomials (u^2 ~ 1e7), which costs it about 8 digits here; the
    # normalised fit reproduces the generating polynomial to rounding.
    assert_allclose(fitted.pixels_to_chart(probe), reference(probe), rtol=0, atol=1e-7)
    assert_allclose(fitted.pixels_to_chart(probe), quadratic_monomials(probe) @ coefficients.T, rtol=0, atol=1e-11)


def test_polynomial2_is_ordinary_least_squares_on_noisy_points() -> None:
    """Reference: numpy.linalg.lstsq on the raw monomials (1, u, v, u^2, uv, v^2)."""
    rng = np.random.default_rng(17)
    pixels = _pixels(rng, 20)
    chart = np.column_stack([0.01 * pixels[:, 0] + 2e-6 * pixels[:, 0] * pixels[:, 1], -0.02 * pixels[:, 1]])
    chart += rng.normal(0, 0.05, chart.shape)
    coefficients = np.linalg.lstsq(quadratic_monomials(pixels), chart, rcond=None)[0]
    probe = _pixels(rng, 50)
    expected = quadratic_monomials(probe) @ coefficients
    assert_allclose(
        fit_transform(pixels, chart, name="polynomial2").pixels_to_chart(probe), expected, rtol=1e-9, atol=1e-9
    )


@pytest.mark.parametrize("name", TRANSFORM_NAMES)
def test_minimum_points_fit_exactly(name: str) -> None:
    """With exactly the minimum number of points the fit is exact (REFERENCES.md, registration)."""
    rng = np.random.default_rng(18)
    pixels = _pixels(rng, TRANSFORM_MIN_POINTS[name])
    # A chart tilted and scaled unevenly, then every value moved by up to 1 % of its range.
    chart = pixels @ np.array([[0.01, 0.002], [0.001, -0.05]]).T + rng.uniform(-0.3, 0.3, pixels.shape)
    report = _calibrate(pixels, chart, transform=name).residual_report
    assert report.transform == name
    assert_allclose(report.residuals_px, 0.0, atol=1e-9)
    assert_allclose(report.residuals_values, 0.0, atol=1e-9)
    assert report.loo_rms_px is None
    assert any("exactly" in warning for warning in report.warnings)


@settings(max_examples=80, deadline=None)
@given(
    name=st.sampled_from(TRANSFORM_NAMES),
    seed=st.integers(0, 2**32 - 1),
    u=st.floats(0.0, 3000.0),
    v=st.floats(0.0, 2000.0),
)
def test_round_trips_hold_to_1e_9_px(name: str, seed: int, u: float, v: float) -> None:
    rng = np.random.default_rng(seed)
    truth = _truth(name, rng)
    pixels = _pixels(rng, 10)
    chart = _apply_truth(name, truth, pixels) + rng.normal(0, 1e-3, (10, 2))
    fitted = fit_transform(pixels, chart, name=name)
    point = np.array([[u, v]])
    assert_allclose(fitted.chart_to_pixels(fitted.pixels_to_chart(point)), point, rtol=0, atol=1e-9)
    there = fitted.chart_to_pixels(_apply_truth(name, truth, point))
    back = fitted.chart_to_pixels(fitted.pixels_to_chart(there))
    assert_allclose(back, there, rtol=0, atol=1e-9)


def test_polynomial_inverse_converges_where_the_map_bends_by_tens_of_pixels() -> None:
    """Newton must land on the chart -> pixel preimage even where the map bends by tens of pixels."""
    rng = np.random.default_rng(19)
    pixels = _pixels(rng, 16)
    bend = np.column_stack([pixels[:, 0] + 1e-5 * pixels[:, 1] ** 2, pixels[:, 1] - 8e-6 * pixels[:, 0] ** 2])
    fitted = fit_transform(pixels, bend, name="polynomial2")
    assert isinstance(fitted, QuadraticTransform)
    grid = np.stack(np.meshgrid(np.linspace(0, 3000, 101), np.linspace(0, 2000, 101)), axis=-1).reshape(-1, 2)
    assert_allclose(fitted.chart_to_pixels(fitted.pixels_to_chart(grid)), grid, rtol=0, atol=1e-9)


def test_rms_and_residuals_follow_the_documented_formula() -> None:
    """RMS = sqrt(sum(du^2 + dv^2) / n) (REFERENCES.md, registration)."""
    rng = np.random.default_rng(20)
    pixels = _pixels(rng, 8)
    chart = pixels @ np.array([[0.02, 0.0], [0.0, -0.05]]).T + rng.normal(0, 0.05, (8, 2))
    calibration = _calibrate(pixels, chart, transform="affine")
    report = calibration.residual_report
    assert_allclose(report.residuals_px, pixels - calibration.values_to_pixels(chart), rtol=0, atol=1e-12)
    assert_allclose(report.rms_px, np.sqrt(np.sum(report.residuals_px**2) / 8), rtol=1e-14)
    assert_allclose(report.residuals_values, calibration.pixels_to_values(pixels) - chart, rtol=0, atol=1e-12)
    assert report.rms_values[0] == pytest.approx(float(np.sqrt(np.mean(report.residuals_values[:, 0] ** 2))), rel=1e-14)


def test_leave_one_out_errors_match_a_manual_refit() -> None:
    """Reference: refit with numpy.linalg.lstsq without point i, invert, measure point i's pixel error."""
    rng = np.random.default_rng(21)
    pixels = _pixels(rng, 7)
    chart = pixels @ np.array([[0.02, 0.003], [0.001, -0.05]]).T + rng.normal(0, 0.1, (7, 2))
    report = _calibrate(pixels, chart, transform="affine").residual_report
    expected = []
    for i in range(7):
        keep = np.arange(7) != i
        solution = np.linalg.lstsq(np.column_stack([pixels[keep], np.ones(6)]), chart[keep], rcond=None)[0].T
        predicted = np.linalg.solve(solution[:, :2], chart[i] - solution[:, 2])
        expected.append(np.hypot(*(pixels[i] - predicted)))
    assert report.loo_errors_px is not None
    assert_allclose(report.loo_errors_px, expected, rtol=1e-9)
    assert report.loo_rms_px == pytest.approx(float(np.sqrt(np.mean(np.square(expected)))), rel=1e-9)


@pytest.mark.parametrize(
    ("truth_name", "n", "expected"),
    [
        ("similarity", 10, "similarity"),
        ("affine", 12, "affine"),
        ("projective", 12, "projective"),
        ("polynomial2", 16, "polynomial2"),
    ],
)
def test_automatic_choice_finds_the_generating_model(truth_name: str, n: int, expected: str) -> None:
    rng = np.random.default_rng(22)
    pixels = _pixels(rng, n)
    if truth_name == "similarity":
        chart = np.column_stack([0.01 * pixels[:, 0], -0.01 * pixels[:, 1]])
    elif truth_name == "affine":
        chart = np.column_stack([0.01 * pixels[:, 0] + 0.002 * pixels[:, 1], -0.05 * pixels[:, 1]])
    elif truth_name == "projective":
        chart = _homography(np.array([[0.02, 0.0, 0.0], [0.0, -0.02, 40.0], [2e-4, 1e-4, 1.0]]), pixels)
    else:
        chart = np.column_stack(
            [0.01 * pixels[:, 0] + 3e-6 * pixels[:, 1] ** 2, -0.01 * pixels[:, 1] + 4e-6 * pixels[:, 0] ** 2]
        )
    chart = chart + rng.normal(0, 2e-3, chart.shape)
    report = _calibrate(pixels, chart).residual_report
    assert report.transform == expected
    assert set(report.loo_rms_by_transform) == {name for name in TRANSFORM_NAMES if TRANSFORM_MIN_POINTS[name] < n}


def test_three_points_on_unequal_axes_choose_an_exact_affine_with_a_warning() -> None:
    """Hours across, percent up: a similarity cannot fit, so the exact (unchecked) affine is taken."""
    pixels = np.array([[100.0, 1900.0], [2900.0, 1900.0], [100.0, 100.0]])
    values = np.array([[0.0, 0.0], [24.0, 0.0], [0.0, 100.0]])
    report = _calibrate(pixels, values).residual_report
    assert report.transform == "affine"
    assert any("exactly" in warning for warning in report.warnings)
    assert report.loo_rms_by_transform["similarity"] is not None
    assert report.loo_rms_by_transform["similarity"] > 100.0


def test_two_points_warn_that_a_similarity_assumes_equal_axis_lengths() -> None:
    report = _calibrate(np.array([[0.5, 0.5], [10.5, 20.5]]), np.array([[0.0, 0.0], [1.0, 2.0]])).residual_report
    assert report.transform == "similarity"
    assert any("same length on both axes" in warning for warning in report.warnings)


def test_a_point_that_stands_out_is_flagged() -> None:
    rng = np.random.default_rng(23)
    pixels = _pixels(rng, 10)
    chart = np.column_stack([0.01 * pixels[:, 0], -0.05 * pixels[:, 1]]) + rng.normal(0, 0.002, (10, 2))
    pixels[4] += (30.0, -20.0)
    report = _calibrate(pixels, chart, transform="affine").residual_report
    assert report.outliers.tolist() == [i == 4 for i in range(10)]
    assert any("control_points[4] stands out" in warning for warning in report.warnings)


def test_duplicate_and_conflicting_points_are_reported() -> None:
    pixels = np.array([[0.5, 0.5], [100.5, 0.5], [0.5, 100.5], [0.5, 0.5], [100.5, 100.5], [300.5, 300.5]])
    chart = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0], [0.0, 0.0], [1.0, 1.0], [1.0, 1.0]])
    warnings = inspect_control_points(pixels, chart, transform="auto")
    assert "control_points[0] and control_points[3] are duplicates (same pixel and value)" in warnings
    assert any("control_points[4] and control_points[5] have the same value" in w for w in warnings)
    conflicting = inspect_control_points(pixels[:3], np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]]), transform="affine")
    assert not any("same pixel" in w for w in conflicting)
    chart[3] = (0.5, 0.5)
    assert any(
        "same pixel but have different values" in w for w in inspect_control_points(pixels, chart, transform="auto")
    )


@pytest.mark.parametrize(
    ("pixels", "chart", "transform", "message"),
    [
        ([[1.0, 1.0]], [[0.0, 0.0]], "auto", r"at least 2 distinct points, got 1"),
        ([[1.0, 1.0], [1.2, 1.1], [1.0, 1.0]], [[0.0, 0.0], [0.0, 0.0], [1.0, 1.0]], "auto", r"at least 2 distinct"),
        ([[1.0, 1.0], [50.0, 90.0]], [[0.0, 0.0], [1.0, 1.0]], "affine", r"affine transform needs at least 3 distinct"),
        (
            [[0.0, 0.0], [10.0, 10.0], [20.0, 20.0]],
            [[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]],
            "auto",
            r"points lie on one line",
        ),
        (
            [[0.0, 0.0], [10.0, 0.0], [0.0, 10.0]],
            [[0.0, 0.0], [1.0, 1.0], [2.0, 2.0]],
            "affine",
            r"values lie on one line",
        ),
        (
            [[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]],
            [[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]],
            "perspective",
            r"unknown transform",
        ),
    ],
)
def test_unusable_control_points_raise(
    pixels: list[list[float]], chart: list[list[float]], transform: str, message: str
) -> None:
    with pytest.raises(ScienceInputError, match=message):
        inspect_control_points(np.array(pixels), np.array(chart), transform=transform)


def test_polynomial2_refuses_points_on_one_conic() -> None:
    """Six points on one circle satisfy u^2 + v^2 = const, so the six monomials are dependent."""
    angles = np.linspace(0, 2 * np.pi, 7)[:-1]
    pixels = np.column_stack([500 + 300 * np.cos(angles), 500 + 300 * np.sin(angles)])
    with pytest.raises(ScienceInputError, match="conic"):
        fit_transform(pixels, pixels * 0.1, name="polynomial2")


def test_projective_refuses_three_points_on_a_line() -> None:
    pixels = np.array([[0.0, 0.0], [100.0, 0.0], [200.0, 0.0], [0.0, 100.0]])
    with pytest.raises(ScienceInputError, match="one line"):
        fit_transform(pixels, pixels * 0.1 + 3, name="projective")


def test_control_points_must_be_finite_pairs() -> None:
    with pytest.raises(ScienceInputError, match=r"control_points pixel\[1\]: coordinates must be finite"):
        _calibrate(np.array([[0.0, 0.0], [np.nan, 1.0], [5.0, 9.0]]), np.zeros((3, 2)))
    with pytest.raises(ScienceInputError, match=r"shape \(n, 2\)"):
        _calibrate(np.zeros((3, 3)), np.zeros((3, 2)))
    with pytest.raises(ScienceInputError, match="as many pixels as values"):
        _calibrate(np.zeros((3, 2)), np.zeros((4, 2)))
