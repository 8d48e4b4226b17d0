"""Circular charts and pen-arm geometry, against the arc-correction values of REFERENCES.md."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.optimize import least_squares
from skimage.measure import CircleModel

from tracedesk.science.axes import LinearScale, Log10Scale, SqrtScale
from tracedesk.science.circular import (
    ArcStraightening,
    CircularCalibration,
    PenArm,
    RadiusLaw,
    arc_time_shift,
    fit_circle,
    pen_arm_from_time_line,
    pen_tip_angle,
)
from tracedesk.science.errors import ScienceInputError

MM = 10.0  # px per mm of chart in the synthetic sheets below
CENTRE = (2000.5, 1999.5)


def test_pen_tip_angle_matches_the_reference_values() -> None:
    """L = D = 140 mm: phi(25, 50, 85, 120, 145) = 84.877, 79.713, 72.328, 64.623, 58.811 deg.

    Source: REFERENCES.md, chart recorder geometry (Handbook of Meteorology 1921 p. 202; Walter et al.
    1999); with D = L the formula reduces to arccos(r / 2L), recomputed here independently.
    """
    radii = np.array([25.0, 50.0, 85.0, 120.0, 145.0])
    angles = np.degrees(pen_tip_angle(radii, centre_to_pivot=140.0, arm_length=140.0))
    assert_allclose(angles, [84.877, 79.713, 72.328, 64.623, 58.811], rtol=0, atol=6e-4)
    assert_allclose(angles, np.degrees(np.arccos(radii / 280.0)), rtol=1e-13)


def test_inner_to_outer_arc_offset_in_hours() -> None:
    """26.066 deg between r = 25 and 145 mm = 1.738 h on a 24 h chart, 12.16 h on a 7-day chart (REFERENCES.md)."""
    phi = np.degrees(pen_tip_angle(np.array([25.0, 145.0]), centre_to_pivot=140.0, arm_length=140.0))
    offset = phi[0] - phi[1]
    assert offset == pytest.approx(26.066, abs=6e-4)
    assert offset / 360.0 * 24.0 == pytest.approx(1.738, abs=6e-4)
    assert offset / 360.0 * 168.0 == pytest.approx(12.16, abs=6e-3)


def test_unreachable_radius_has_no_angle() -> None:
    assert np.isnan(pen_tip_angle(np.array([300.0]), centre_to_pivot=140.0, arm_length=140.0))[0]


def test_drum_arc_time_shift_matches_the_reference_values() -> None:
    """L = 150 mm: dx at 20 / 40 / 60 mm from the pivot height = 1.339 / 5.432 / 12.523 mm (REFERENCES.md)."""
    shifts = arc_time_shift(np.array([20.0, -40.0, 60.0]), arm_length=150.0)
    assert_allclose(shifts, [1.339, 5.432, 12.523], rtol=0, atol=6e-4)
    assert_allclose(shifts, 150.0 - np.sqrt(150.0**2 - np.array([20.0, 40.0, 60.0]) ** 2), rtol=1e-13)
    assert np.isnan(arc_time_shift(np.array([151.0]), arm_length=150.0))[0]


def test_circle_fit_recovers_a_known_circle_from_noisy_points() -> None:
    """Reference: the generating circle, and scipy.optimize.least_squares on the same geometric residuals."""
    rng = np.random.default_rng(31)
    angles = rng.uniform(0.2, 2.4, 40)  # only part of the ring, as a user would click
    points = np.column_stack([812.25 + 640.0 * np.cos(angles), 733.75 + 640.0 * np.sin(angles)])
    points += rng.normal(0, 0.5, points.shape)
    fit = fit_circle(points)
    assert_allclose(fit.centre, (812.25, 733.75), atol=1.5)
    assert fit.radius == pytest.approx(640.0, abs=1.5)
    reference = least_squares(
        lambda p: np.hypot(points[:, 0] - p[0], points[:, 1] - p[1]) - p[2],
        x0=[800.0, 700.0, 600.0],
        xtol=1e-15,
        ftol=1e-15,
    ).x
    assert_allclose([*fit.centre, fit.radius], reference, rtol=1e-9)
    assert fit.rms_px == pytest.approx(float(np.sqrt(np.mean(fit.residuals_px**2))), rel=1e-12)
    assert 0.3 < fit.rms_px < 0.7


def test_circle_fit_is_exact_on_exact_points() -> None:
    """Reference: scikit-image CircleModel (algebraic fit) agrees on points exactly on a circle."""
    angles = np.array([0.1, 1.0, 2.0, 4.0])
    points = np.column_stack([100.5 + 50.0 * np.cos(angles), 200.5 + 50.0 * np.sin(angles)])
    fit = fit_circle(points)
    model = CircleModel.from_estimate(points)
    assert_allclose([*fit.centre, fit.radius], [100.5, 200.5, 50.0], atol=1e-9)
    assert_allclose([*model.center, model.radius], [100.5, 200.5, 50.0], atol=1e-9)


@pytest.mark.parametrize(
    ("points", "message"),
    [([[0.0, 0.0], [1.0, 1.0]], "at least 3 distinct"), ([[0.0, 0.0], [1.0, 1.0], [2.0, 2.0]], "one line")],
)
def test_circle_fit_refuses_too_few_or_collinear_points(points: list[list[float]], message: str) -> None:
    with pytest.raises(ScienceInputError, match=message):
        fit_circle(points, field="ring_points")


def test_pen_arm_from_points_clicked_on_a_time_line() -> None:
    pivot, length = np.array([2000.0, 600.0]), 1400.0
    angles = np.radians([110.0, 100.0, 95.0, 85.0])
    pen_arm, circle = pen_arm_from_time_line(
        np.column_stack([pivot[0] + length * np.cos(angles), pivot[1] + length * np.sin(angles)])
    )
    assert_allclose(pen_arm.pivot_pixel, pivot, atol=1e-7)
    assert pen_arm.length_px == pytest.approx(length, abs=1e-7)
    assert circle.rms_px < 1e-9


def _daily_chart(**changes: object) -> CircularCalibration:
    """Radial time lines, 0..100 linear from r = 100 to 900 px, time zero at 12 o'clock."""
    options: dict[str, object] = {
        "centre": (1000.0, 1000.0),
        "radius_law": RadiusLaw(LinearScale(), 0.0, 100.0, 100.0, 900.0),
        "period_hours": 24.0,
        "time_zero_pixel": (1000.0, 100.0),
        "time_direction": "clockwise",
    }
    options.update(changes)
    return CircularCalibration(**options)  # type: ignore[arg-type]


def test_radial_chart_reads_hours_clockwise_on_screen() -> None:
    """Hand computation: 3 o'clock is a quarter turn clockwise from 12 o'clock on the screen = 6 h of 24."""
    calibration = _daily_chart()
    values = calibration.pixels_to_values([[1900.0, 1000.0], [1000.0, 1500.0], [600.0, 1000.0]])
    assert_allclose(values, [[6.0, 100.0], [12.0, 50.0], [18.0, 37.5]], rtol=0, atol=1e-12)
    counter = _daily_chart(time_direction="counterclockwise")
    assert_allclose(counter.pixels_to_values([[1900.0, 1000.0]]), [[18.0, 100.0]], rtol=0, atol=1e-12)


def _arm_chart(direction: str, period: float) -> CircularCalibration:
    """L = D = 140 mm, pivot straight above the centre, time zero where the arc meets the 145 mm ring."""
    pivot = (CENTRE[0], CENTRE[1] - 140.0 * MM)
    angle = -math.pi / 2 + math.acos(145.0 / 280.0)  # phi(145 mm) for D = L = 140 mm
    zero = (CENTRE[0] + 145.0 * MM * math.cos(angle), CENTRE[1] + 145.0 * MM * math.sin(angle))
    return CircularCalibration(
        centre=CENTRE,
        radius_law=RadiusLaw(LinearScale(), 0.0, 120.0, 25.0 * MM, 145.0 * MM),
        period_hours=period,
        time_zero_pixel=zero,
        time_direction=direction,
        pen_arm=PenArm(pivot_pixel=pivot, length_px=140.0 * MM),
    )


@pytest.mark.parametrize(("period", "expected_hours"), [(24.0, 1.738), (168.0, 12.16)])
def test_pen_arc_offset_between_inner_and_outer_ring(period: float, expected_hours: float) -> None:
    """A point on the inner ring straight inside the time-zero pixel lies 26.066 deg off the time-zero arc:
    1.738 h on a daily and 12.16 h on a weekly chart (REFERENCES.md). Later times lie counterclockwise, the
    side the inner end of the arc curls away from."""
    calibration = _arm_chart("counterclockwise", period)
    assert not calibration.residual_report.warnings
    zero = np.subtract(calibration.time_zero_pixel, CENTRE)
    inner = np.array([CENTRE]) + zero * (25.0 / 145.0)
    hours, value = calibration.pixels_to_values(inner)[0]
    assert hours == pytest.approx(expected_hours, abs=6e-3 if period > 24 else 6e-4)
    assert value == pytest.approx(0.0, abs=1e-12)
    on_arc = calibration.values_to_pixels([[0.0, 0.0], [0.0, 120.0]])
    assert_allclose(on_arc[1], calibration.time_zero_pixel, rtol=0, atol=1e-9)
    distances = np.hypot(*(on_arc - calibration.pen_arm.pivot_pixel).T)  # type: ignore[union-attr]
    assert_allclose(distances, 140.0 * MM, rtol=1e-12)


def test_time_zero_pixel_off_the_arc_turns_the_arc_and_warns() -> None:
    calibration = _arm_chart("clockwise", 24.0)
    moved = CircularCalibration(
        centre=CENTRE,
        radius_law=calibration.radius_law,
        period_hours=24.0,
        time_zero_pixel=(CENTRE[0], CENTRE[1] - 145.0 * MM),  # 58.8 deg away from the arc
        time_direction="clockwise",
        pen_arm=calibration.pen_arm,
    )
    assert any("off the pen arc" in warning for warning in moved.residual_report.warnings)
    assert_allclose(moved.values_to_pixels([[0.0, 120.0]])[0], moved.time_zero_pixel, atol=1e-9)


def _round_trip_chart(scale: str, direction: str, with_arm: bool) -> CircularCalibration:
    law = {
        "linear": RadiusLaw(LinearScale(), -30.0, 50.0, 250.0, 1450.0),
        "sqrt": RadiusLaw(SqrtScale(), 0.0, 400.0, 250.0, 1450.0),
        "log10": RadiusLaw(Log10Scale(), 1.0, 1000.0, 1450.0, 250.0),
    }[scale]
    if not with_arm:
        return CircularCalibration(
            centre=CENTRE, radius_law=law, period_hours=168.0, time_zero_pixel=(2400.0, 600.0), time_direction=direction
        )
    return _arm_chart(direction, 24.0).__class__(
        centre=CENTRE,
        radius_law=law,
        period_hours=24.0,
        time_zero_pixel=(CENTRE[0] + 1450.0 * math.cos(-0.5), CENTRE[1] + 1450.0 * math.sin(-0.5)),
        time_direction=direction,
        pen_arm=PenArm(pivot_pixel=(CENTRE[0] - 300.0, CENTRE[1] - 1380.0), length_px=1400.0),
    )


@settings(max_examples=150, deadline=None)
@given(
    scale=st.sampled_from(["linear", "sqrt", "log10"]),
    direction=st.sampled_from(["clockwise", "counterclockwise"]),
    with_arm=st.booleans(),
    radius=st.floats(260.0, 1440.0),
    angle=st.floats(-math.pi, math.pi),
)
def test_circular_round_trips_hold_to_1e_9_px(
    scale: str, direction: str, with_arm: bool, radius: float, angle: float
) -> None:
    calibration = _round_trip_chart(scale, direction, with_arm)
    pixel = np.array([[CENTRE[0] + radius * math.cos(angle), CENTRE[1] + radius * math.sin(angle)]])
    values = calibration.pixels_to_values(pixel)
    assert 0.0 <= values[0, 0] < calibration.period_hours
    assert_allclose(calibration.values_to_pixels(values), pixel, rtol=0, atol=1e-9)
    again = calibration.values_to_pixels(calibration.pixels_to_values(calibration.values_to_pixels(values)))
    assert_allclose(again, pixel, rtol=0, atol=1e-9)


def test_check_points_give_a_residual_report() -> None:
    calibration = _daily_chart(
        check_pixels=[[1903.0, 1000.0], [1000.0, 1500.0]], check_values=[[6.0, 100.0], [23.999, 50.0]]
    )
    report = calibration.residual_report
    assert_allclose(report.residuals_px[0], [3.0, 0.0], atol=1e-9)
    assert report.residuals_values[1, 0] == pytest.approx(-11.999, abs=1e-9)  # wrapped across midnight
    assert report.rms_px == pytest.approx(float(np.sqrt(np.sum(report.residuals_px**2) / 2)), rel=1e-12)


@pytest.mark.parametrize(
    ("changes", "message"),
    [
        ({"period_hours": 0.0}, r"period_hours: must be > 0"),
        ({"period_hours": math.inf}, r"period_hours: must be a finite number"),
        ({"centre": (math.nan, 3.0)}, r"centre\[0\]: coordinates must be finite"),
        ({"time_zero_pixel": (1000.0, 1000.0)}, r"time_zero_pixel: must not be the centre"),
        ({"time_direction": "sunwise"}, r"time_direction"),
        ({"pen_arm": PenArm(pivot_pixel=(1000.0, 1000.0), length_px=100.0)}, r"pivot cannot be the chart centre"),
        (
            {"pen_arm": PenArm(pivot_pixel=(1000.0, 900.0), length_px=50.0)},
            r"cannot reach value_axis.radius_max_px = 900 px",
        ),
    ],
)
def test_bad_circular_geometry_raises(changes: dict[str, object], message: str) -> None:
    with pytest.raises(ScienceInputError, match=message):
        _daily_chart(**changes)


@pytest.mark.parametrize(
    ("law", "message"),
    [
        ((LinearScale(), 5.0, 5.0, 100.0, 900.0), r"min \(5\) must be below max \(5\)"),
        ((LinearScale(), 0.0, 5.0, 100.0, 100.0), r"radius_min_px and radius_max_px must differ"),
        ((LinearScale(), 0.0, 5.0, -1.0, 100.0), r"radius_min_px: must be >= 0"),
        ((Log10Scale(), 0.0, 100.0, 100.0, 900.0), r"log10 axis needs values > 0"),
        ((SqrtScale(), -4.0, 100.0, 100.0, 900.0), r"sqrt axis needs values >= 0"),
        ((LinearScale(), math.nan, 1.0, 100.0, 900.0), r"value_axis.min: must be a finite number"),
    ],
)
def test_bad_radius_laws_raise(law: tuple[object, ...], message: str) -> None:
    with pytest.raises(ScienceInputError, match=message):
        RadiusLaw(*law)  # type: ignore[arg-type]


def test_unreachable_pixels_read_as_nan() -> None:
    calibration = _arm_chart("clockwise", 24.0)
    far = np.array([[CENTRE[0] + 5000.0, CENTRE[1]]])
    assert np.all(np.isnan(calibration.pixels_to_values(far)[:, 0]))


def test_arc_straightening_moves_points_by_the_drum_shift() -> None:
    """Drum with L = 150 mm (REFERENCES.md): a point 40 mm below the pivot height sits 5.432 mm towards the
    pivot side of its straight time line; straightening removes exactly that and is exactly undone."""
    straightening = ArcStraightening(
        pivot_pixel=(0.0, 500.0), length_px=150.0 * MM, time_direction=(1.0, 0.0), pivot_side=1.0
    )
    on_arc = np.array([[1000.0 + 5.432 * MM, 500.0 + 40.0 * MM], [1000.0 + 1.339 * MM, 500.0 - 20.0 * MM]])
    assert_allclose(straightening.straighten(on_arc), [[1000.0, 900.0], [1000.0, 300.0]], atol=6e-4 * MM)
    assert_allclose(straightening.unstraighten(straightening.straighten(on_arc)), on_arc, rtol=0, atol=1e-12)
