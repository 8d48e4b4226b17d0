"""Calibrations built from their JSON descriptions: every kind, round trips, conventions and bad input."""

from __future__ import annotations

import contextlib
import json
import math
from typing import Any

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from numpy.typing import NDArray

from tests.science.chart_render import GridLines, render_sheet
from tracedesk.science.calibration import (
    ChartMapping,
    CurvilinearStripCalibration,
    build_calibration,
)
from tracedesk.science.circular import fit_circle
from tracedesk.science.errors import ScienceInputError

FloatArray = NDArray[np.float64]
MM = 10.0  # px per mm on the synthetic drum chart


def _points(pixels: FloatArray, values: Any) -> list[dict[str, Any]]:
    return [{"pixel": [float(u), float(v)], "value": value} for (u, v), value in zip(pixels, values, strict=True)]


def _log_chart_pixels(values: FloatArray) -> FloatArray:
    """Hours across at 100 px/h from u = 100.5; three decades up, 500 px each, from v = 1800.5 (value 1)."""
    return np.column_stack([100.5 + 100.0 * values[:, 0], 1800.5 - 500.0 * np.log10(values[:, 1])])


def _cartesian_spec(transform: str = "auto") -> dict[str, Any]:
    values = np.array([[0.0, 1.0], [24.0, 1.0], [0.0, 1000.0], [24.0, 1000.0], [12.0, 10.0], [6.0, 300.0], [18.0, 2.0]])
    return {
        "kind": "cartesian",
        "x_axis": {"scale": "time"},
        "y_axis": {"scale": "log10"},
        "control_points": _points(_log_chart_pixels(values), values.tolist()),
        "transform": transform,
    }


def test_cartesian_log_chart_reads_values_between_the_control_points() -> None:
    """Decade spacing: the pixel halfway between 10 and 1000 reads 100 (log10 definition)."""
    calibration = build_calibration(_cartesian_spec())
    assert calibration.kind == "cartesian"
    assert calibration.residual_report.transform == "affine"  # 100 px per hour but 500 px per decade
    probe = np.array([[3.5, 100.0], [20.25, 5.5]])
    assert_allclose(calibration.pixels_to_values(_log_chart_pixels(probe)), probe, rtol=1e-12)
    assert_allclose(calibration.values_to_pixels(probe), _log_chart_pixels(probe), rtol=0, atol=1e-9)
    json.dumps(calibration.residual_report.to_dict(), allow_nan=False)


def test_values_a_log_axis_cannot_show_are_refused_and_nan_passes() -> None:
    calibration = build_calibration(_cartesian_spec())
    with pytest.raises(ScienceInputError, match=r"y value: a log10 axis needs values > 0, got -5"):
        calibration.values_to_pixels([[1.0, -5.0]])
    assert np.all(np.isnan(calibration.values_to_pixels([[1.0, np.nan]])))


def test_control_point_times_may_be_iso_date_times_when_the_start_is_known() -> None:
    spec = _cartesian_spec()
    spec["x_axis"] = {"scale": "time", "start": "2024-06-01T00:00:00+02:00"}
    spec["control_points"][1]["value"][0] = "2024-06-01T22:00:00Z"  # 24 h after the start
    calibration = build_calibration(spec)
    assert_allclose(calibration.residual_report.residuals_px, 0.0, atol=1e-9)
    spec["x_axis"] = {"scale": "time"}
    with pytest.raises(ScienceInputError, match=r"control_points\[1\].value\[0\]: a date-time needs a time axis"):
        build_calibration(spec)


def test_half_pixel_convention_on_a_rendered_grid() -> None:
    """ARCHITECTURE.md: pixel (i, j) covers [i, i+1) x [j, j+1), centre (i + 0.5, j + 0.5).

    matplotlib (Agg, via tests/science/chart_render.py) draws 1-px grid lines centred on pixel centres.
    The line centres are measured from the image as ink-weighted means of column/row index + 0.5, used
    as control points, and the calibration must then put each printed value back on its line's centre;
    a half-pixel slip would show as 0.5 px here.
    """
    u_lines, v_lines = [40.5, 240.5, 440.5], [30.5, 180.5, 330.5]
    image = render_sheet(width_px=480, height_px=360, strokes=[], grid=GridLines(u_lines, v_lines, colour="#000000"))
    ink = 255.0 - image.mean(axis=2)
    columns = ink[5:25].sum(axis=0)  # a band of rows away from the horizontal lines
    rows = ink[:, 10:30].sum(axis=1)
    measured_u = [_centre_of_ink(columns, around) for around in u_lines]
    measured_v = [_centre_of_ink(rows, around) for around in v_lines]
    assert_allclose(measured_u + measured_v, u_lines + v_lines, atol=0.05)
    pixels = np.array([[u, v] for u in measured_u[::2] for v in measured_v[::2]])
    values = np.array([[x, y] for x in (0.0, 10.0) for y in (20.0, 0.0)])
    calibration = build_calibration(
        {
            "kind": "cartesian",
            "x_axis": {"scale": "linear"},
            "y_axis": {"scale": "linear"},
            "control_points": _points(pixels, values.tolist()),
        }
    )
    assert_allclose(calibration.values_to_pixels([[5.0, 10.0]]), [[240.5, 180.5]], atol=0.05)
    assert_allclose(
        calibration.pixels_to_values([[240.5, 180.5], [240.0, 180.0]]), [[5.0, 10.0], [4.9875, 10.0333]], atol=2e-3
    )


def _centre_of_ink(profile: FloatArray, around: float) -> float:
    index = np.arange(int(around) - 4, int(around) + 5)
    weights = profile[index]
    return float(np.sum((index + 0.5) * weights) / np.sum(weights))


def _drum_pixels(values: FloatArray, *, skew_deg: float = 0.0) -> FloatArray:
    """Drum chart truth: 100 px/h to the right, 10 px per unit down from v = 1100.5 (value 0) to
    100.5 (value 100), pen arm L = 150 mm with its pivot at v = 600.5 on the later side, turned by skew."""
    v = 1100.5 - 10.0 * values[:, 1]
    straight_u = 200.5 + 100.0 * values[:, 0]
    shift = 150.0 * MM - np.sqrt((150.0 * MM) ** 2 - (v - 600.5) ** 2)
    points = np.column_stack([straight_u + shift, v])
    angle = math.radians(skew_deg)
    rotation = np.array([[math.cos(angle), -math.sin(angle)], [math.sin(angle), math.cos(angle)]])
    return (points - 600.0) @ rotation.T + 600.0


def _drum_spec(skew_deg: float = 0.0, transform: str = "affine") -> dict[str, Any]:
    values = np.array([[t, y] for t in (0.0, 8.0, 16.0, 24.0) for y in (0.0, 30.0, 70.0, 100.0)])
    pivot = _drum_pixels(np.array([[30.0, 50.0]]), skew_deg=skew_deg)[0]  # any point at the pivot height
    return {
        "kind": "curvilinear",
        "x_axis": {"scale": "time"},
        "y_axis": {"scale": "linear"},
        "control_points": _points(_drum_pixels(values, skew_deg=skew_deg), values.tolist()),
        "transform": transform,
        "pen_arc": {"pivot_pixel": pivot.tolist(), "length_px": 150.0 * MM, "pivot_side": "later"},
    }


@pytest.mark.parametrize("skew_deg", [0.0, 1.5])
def test_curvilinear_drum_chart_moves_values_by_the_reference_arc_shift(skew_deg: float) -> None:
    """L = 150 mm: values 20 / 40 / 60 mm from the pivot height sit 1.339 / 5.432 / 12.523 mm later on the
    image than on a straight time line (REFERENCES.md, drum charts)."""
    calibration = build_calibration(_drum_spec(skew_deg))
    assert isinstance(calibration, CurvilinearStripCalibration)
    assert_allclose(calibration.residual_report.residuals_px, 0.0, atol=1e-8)
    values = np.array([[10.0, 30.0], [10.0, 90.0], [10.0, -10.0]])  # 20, 40 (above) and 60 mm from the pivot
    straight = calibration.straight.values_to_pixels(values)
    shift = np.hypot(*(calibration.values_to_pixels(values) - straight).T)
    assert_allclose(shift / MM, [1.339, 5.432, 12.523], rtol=0, atol=6e-4)
    assert_allclose(calibration.pixels_to_values(_drum_pixels(values, skew_deg=skew_deg)), values, rtol=0, atol=1e-9)


def test_curvilinear_pivot_side_matters() -> None:
    spec = _drum_spec()
    spec["pen_arc"]["pivot_side"] = "earlier"
    wrong = build_calibration(spec)
    assert wrong.residual_report.rms_px is not None
    assert wrong.residual_report.rms_px > 10.0
    spec["pen_arc"]["pivot_side"] = "up"
    with pytest.raises(ScienceInputError, match=r"pen_arc.pivot_side: expected one of later, earlier"):
        build_calibration(spec)


def _strip_spec(tilt: float = 0.0) -> dict[str, Any]:
    """Value scale clicked down one time line through (150.5, 80.5); 10 at v = 100.5, 0 at v = 900.5."""
    values = [10.0, 7.5, 2.5, 0.0]
    pixels = np.array([[150.5 + tilt * (v - 80.5), v] for v in (100.5, 300.5, 700.5, 900.5)])
    return {
        "kind": "strip_speed",
        "y_axis": {"scale": "linear"},
        "control_points": _points(pixels, values),
        "time_zero_pixel": [150.5, 80.5],
        "time_direction": "right",
        "chart_speed_mm_per_hour": 20.0,
        "scan_dpi": 300.0,
        "start": "2023-11-05T06:00:00-03:00",
    }


def test_strip_chart_timed_by_chart_speed() -> None:
    """20 mm/h at 300 dpi = 236.2205 px/h (1 in = 25.4 mm): one hour right of time zero reads 1 h."""
    calibration = build_calibration(_strip_spec())
    assert_allclose(calibration.pixels_to_values([[150.5 + 236.22047244, 500.5]]), [[1.0, 5.0]], rtol=0, atol=1e-8)
    report = calibration.residual_report
    assert report.transform == "chart_speed"
    assert report.loo_rms_px is not None
    assert report.loo_rms_px < 1e-9
    assert report.rms_values[0] is None
    json.dumps(report.to_dict(), allow_nan=False)


def test_strip_chart_time_runs_perpendicular_to_a_tilted_value_scale() -> None:
    tilt = 0.02  # the scan is turned by atan(0.02)
    calibration = build_calibration(_strip_spec(tilt))
    direction = np.array([1.0, -tilt]) / math.hypot(1.0, tilt)
    later = np.array([[150.5, 80.5]]) + 236.22047244 * 3.0 * direction
    assert_allclose(calibration.pixels_to_values(later)[0, 0], 3.0, atol=1e-8)


def _circular_spec() -> dict[str, Any]:
    """Weekly sqrt chart; arm of 900 px pivoting 900 px from the centre; time zero on the 950 px ring."""
    pivot_angle = math.radians(-60.0)
    zero_angle = pivot_angle - math.acos(950.0 / 1800.0)  # phi(r) = arccos(r / 2L) when D = L
    return {
        "kind": "circular",
        "centre": [1000.5, 1000.5],
        "value_axis": {"scale": "sqrt", "min": 0.0, "max": 400.0, "radius_min_px": 150.0, "radius_max_px": 950.0},
        "period_hours": 168.0,
        "time_zero_pixel": [1000.5 + 950.0 * math.cos(zero_angle), 1000.5 + 950.0 * math.sin(zero_angle)],
        "time_direction": "counterclockwise",
        "pen_arc": {
            "pivot_pixel": [1000.5 + 900.0 * math.cos(pivot_angle), 1000.5 + 900.0 * math.sin(pivot_angle)],
            "length_px": 900.0,
        },
        "start": "2024-02-05T00:00:00+00:00",
        "check_points": [
            {
                "pixel": [1000.5 + 950.0 * math.cos(zero_angle), 1000.5 + 950.0 * math.sin(zero_angle)],
                "value": ["2024-02-05T00:00:00Z", 400.0],
            }
        ],
    }


def test_circular_spec_builds_a_calibration_with_check_points() -> None:
    calibration = build_calibration(_circular_spec())
    assert calibration.kind == "circular"
    assert calibration.x_period_hours == 168.0
    assert_allclose(calibration.residual_report.residuals_px, 0.0, atol=1e-9)
    assert calibration.residual_report.warnings == ()


def _time_line_clicks(spec: dict[str, Any], *, wobble_px: float) -> FloatArray:
    """Pixels along one printed time line of a spec's typed pen arm, pushed off it by +-wobble_px in turn.

    Circular chart: the time-zero arc, 0 to 40 deg of arm swing from time zero inwards (radii 950 to about
    370 px). Drum chart: the 12 h line, values -10 to 110.
    """
    if spec["kind"] == "circular":
        pivot = np.array(spec["pen_arc"]["pivot_pixel"])
        offset = np.array(spec["time_zero_pixel"]) - pivot
        swing = math.atan2(offset[1], offset[0]) - np.radians([0.0, 10.0, 20.0, 30.0, 40.0])
        normals = np.column_stack([np.cos(swing), np.sin(swing)])
        points = pivot + spec["pen_arc"]["length_px"] * normals
    else:
        points = _drum_pixels(np.array([[12.0, y] for y in (-10.0, 20.0, 50.0, 80.0, 110.0)]), skew_deg=1.5)
        normals = np.tile([[1.0, 0.0]], (points.shape[0], 1))
    return points + wobble_px * np.array([1.0, -1.0, 1.0, -1.0, 1.0])[:, None] * normals


def _with_arm(spec: dict[str, Any], arm: dict[str, Any]) -> dict[str, Any]:
    """The spec with another pen_arc (keeping its pivot_side, if any)."""
    side = {"pivot_side": spec["pen_arc"]["pivot_side"]} if "pivot_side" in spec["pen_arc"] else {}
    return {**spec, "pen_arc": {**arm, **side}}


def _clicked_arm_spec(base: dict[str, Any], *, wobble_px: float = 0.0) -> dict[str, Any]:
    return _with_arm(base, {"time_line_points": _time_line_clicks(base, wobble_px=wobble_px).tolist()})


def _sample_pixels(kind: str) -> FloatArray:
    """Pixels across the circular chart's value rings, or across the drum chart (a fixed pseudo-random set)."""
    rng = np.random.default_rng(7)
    if kind == "circular":
        radius, angle = rng.uniform(160.0, 940.0, 200), rng.uniform(0.0, 2.0 * math.pi, 200)
        return np.column_stack([1000.5 + radius * np.cos(angle), 1000.5 + radius * np.sin(angle)])
    return np.column_stack([rng.uniform(200.0, 2600.0, 200), rng.uniform(100.0, 1100.0, 200)])


@pytest.mark.parametrize("base", [_circular_spec, lambda: _drum_spec(1.5)], ids=["circular", "curvilinear"])
def test_clicked_time_line_gives_the_arm_of_its_fitted_circle(base: Any) -> None:
    """time_line_points map exactly as the typed arm whose pivot and length are fit_circle's centre and radius
    of those points (the circle through a pen arc has the pivot as centre and the arm as radius: circular.py)."""
    spec = base()
    clicked = _clicked_arm_spec(spec, wobble_px=0.4)
    circle = fit_circle(clicked["pen_arc"]["time_line_points"])
    assert circle.rms_px > 0.1  # the wobble keeps the fit from being exact, so the pivot really comes from it
    typed = _with_arm(spec, {"pivot_pixel": list(circle.centre), "length_px": circle.radius})
    pixels = _sample_pixels(spec["kind"])
    expected = build_calibration(typed).pixels_to_values(pixels)
    assert np.isfinite(expected).mean() > 0.9
    assert_allclose(build_calibration(clicked).pixels_to_values(pixels), expected, rtol=0, atol=1e-9)


@pytest.mark.parametrize("base", [_circular_spec, lambda: _drum_spec(1.5)], ids=["circular", "curvilinear"])
def test_clicks_exactly_on_the_arc_give_back_the_typed_arm(base: Any) -> None:
    """Clicks on the pen arc of the typed arm (computed from its pivot and length) read as the typed spec."""
    spec = base()
    pixels = _sample_pixels(spec["kind"])
    expected = build_calibration(spec).pixels_to_values(pixels)
    assert_allclose(build_calibration(_clicked_arm_spec(spec)).pixels_to_values(pixels), expected, rtol=0, atol=1e-7)


@pytest.mark.parametrize(
    ("base", "arm", "message"),
    [
        ("circular", {}, r"^pen_arc: give time_line_points \(3 or more .*\) or pivot_pixel and length_px$"),
        ("curvilinear", {"pivot_side": "later"}, r"^pen_arc: give time_line_points \(3 or more"),
        ("circular", {"time_line_points": "clicks"}, r"^pen_arc.time_line_points: expected a list"),
        (
            "circular",
            {"time_line_points": [[0.0, 0.0], [1.0, 1.0]]},
            r"^pen_arc.time_line_points: a circle needs at least 3 distinct points",
        ),
        (
            "curvilinear",
            {"time_line_points": [[0.0, 0.0], [10.0, 10.0], [20.0, 20.0]], "pivot_side": "later"},
            r"^pen_arc.time_line_points: the points lie on one line",
        ),
        (
            "circular",
            {"time_line_points": [[0.0, 0.0], [1.0], [2.0, 0.0]]},
            r"^pen_arc.time_line_points\[1\]: expected a pair",
        ),
        (
            "circular",
            {"time_line_points": [[0.0, 0.0], [1.0, math.nan], [2.0, 0.0]]},
            r"^pen_arc.time_line_points\[1\]\[1\]: must be a finite number",
        ),
        ("circular", {"time_line_points": [[0.0, 0.0], [1.0, 1.0], [2.0, 0.0]]}, r"^pen_arc: an arm of 1 px"),
    ],
)
def test_bad_clicked_arms_are_refused_naming_pen_arc(base: str, arm: dict[str, Any], message: str) -> None:
    spec = {"circular": _circular_spec, "curvilinear": _drum_spec}[base]()
    with pytest.raises(ScienceInputError, match=message):
        build_calibration({**spec, "pen_arc": arm})


BOTH_ARMS = r"^pen_arc: give time_line_points or pivot_pixel and length_px, not both$"


@pytest.mark.parametrize("base", [_circular_spec, _drum_spec], ids=["circular", "curvilinear"])
def test_clicked_and_typed_arm_together_are_refused(base: Any) -> None:
    spec = base()
    both = {**spec["pen_arc"], "time_line_points": _time_line_clicks(spec, wobble_px=0.0).tolist()}
    with pytest.raises(ScienceInputError, match=BOTH_ARMS):
        build_calibration({**spec, "pen_arc": both})
    del both["length_px"]  # a pivot alone still counts as typed
    with pytest.raises(ScienceInputError, match=BOTH_ARMS):
        build_calibration({**spec, "pen_arc": both})


def _mapping_for(kind: str) -> ChartMapping:
    specs = {
        "similarity": lambda: _cartesian_spec("similarity"),
        "affine": lambda: _cartesian_spec("affine"),
        "projective": lambda: _cartesian_spec("projective"),
        "polynomial2": lambda: _cartesian_spec("polynomial2"),
        "curvilinear": lambda: _drum_spec(1.5, "projective"),
        "strip_speed": lambda: _strip_spec(0.02),
        "circular": _circular_spec,
    }
    return build_calibration(specs[kind]())


MAPPINGS = {
    kind: _mapping_for(kind)
    for kind in ("similarity", "affine", "projective", "polynomial2", "curvilinear", "strip_speed", "circular")
}


@settings(max_examples=150, deadline=None)
@given(kind=st.sampled_from(sorted(MAPPINGS)), a=st.floats(0.0, 1.0), b=st.floats(0.0, 1.0))
def test_every_kind_round_trips_to_1e_9_px(kind: str, a: float, b: float) -> None:
    """Pixels across each chart (for the circular chart: its ring between the lowest and highest value)."""
    mapping = MAPPINGS[kind]
    if kind == "circular":
        radius, angle = 160.0 + 780.0 * a, 2.0 * math.pi * b
        pixel = np.array([[1000.5 + radius * math.cos(angle), 1000.5 + radius * math.sin(angle)]])
    else:
        pixel = np.array([[100.0 + 2500.0 * a, 100.0 + 1500.0 * b]])
    values = mapping.pixels_to_values(pixel)
    assert np.all(np.isfinite(values))
    assert_allclose(mapping.values_to_pixels(values), pixel, rtol=0, atol=1e-9)
    again = mapping.pixels_to_values(mapping.values_to_pixels(values))
    assert_allclose(mapping.values_to_pixels(again), pixel, rtol=0, atol=1e-9)


def _spec_with(base: dict[str, Any], path: tuple[Any, ...], value: Any) -> dict[str, Any]:
    spec = json.loads(json.dumps(base))
    target = spec
    for key in path[:-1]:
        target = target[key]
    if value is _DELETE:
        del target[path[-1]]
    else:
        target[path[-1]] = value
    return spec


_DELETE = object()


@pytest.mark.parametrize(
    ("base", "path", "value", "message"),
    [
        ("cartesian", ("kind",), "spiral", r"^kind: expected one of cartesian, curvilinear, strip_speed, circular"),
        ("cartesian", ("x_axis",), _DELETE, r"^x_axis: missing"),
        ("cartesian", ("y_axis", "scale"), "ln", r"^y_axis.scale: expected one of linear, log10, sqrt, time"),
        (
            "cartesian",
            ("control_points", 2, "pixel"),
            [1.0, math.nan],
            r"^control_points\[2\].pixel\[1\]: must be a finite number",
        ),
        (
            "cartesian",
            ("control_points", 2, "pixel"),
            [1.0, True],
            r"^control_points\[2\].pixel\[1\]: expected a number",
        ),
        ("cartesian", ("control_points", 2, "value"), [1.0], r"^control_points\[2\].value: expected a pair"),
        (
            "cartesian",
            ("control_points", 0, "value"),
            [0.0, 0.0],
            r"^control_points y value: a log10 axis needs values > 0",
        ),
        ("cartesian", ("control_points",), "all", r"^control_points: expected a list"),
        ("cartesian", ("transform",), "rubber", r"^transform: expected one of auto"),
        ("cartesian", ("x_axis", "start"), "yesterday", r"^x_axis.start: 'yesterday' is not an ISO 8601"),
        ("circular", ("period_hours",), 0, r"^period_hours: must be > 0"),
        ("circular", ("period_hours",), -math.inf, r"^period_hours: must be a finite number"),
        ("circular", ("centre",), [1.0], r"^centre: expected a pair"),
        ("circular", ("value_axis", "max"), 0.0, r"^value_axis: min \(0\) must be below max \(0\)"),
        (
            "circular",
            ("value_axis", "radius_max_px"),
            150.0,
            r"^value_axis: radius_min_px and radius_max_px must differ",
        ),
        ("circular", ("value_axis", "scale"), "time", r"^value_axis.scale: expected one of linear, sqrt, log10"),
        ("circular", ("pen_arc", "length_px"), 0.0, r"^pen_arc.length_px: must be > 0"),
        ("circular", ("pen_arc", "length_px"), 50.0, r"^pen_arc: an arm of 50 px"),
        ("circular", ("time_direction",), "up", r"^time_direction: expected one of clockwise, counterclockwise"),
        ("circular", ("start",), "2024-02-05T00:00:00", r"^start: .* has no UTC offset"),
        ("strip_speed", ("scan_dpi",), 0.0, r"^scan_dpi: must be a finite number > 0"),
        ("strip_speed", ("control_points",), [], r"^control_points: at least two points with different values"),
        ("strip_speed", ("time_direction",), "clockwise", r"^time_direction: expected one of right, left, down, up"),
        ("curvilinear", ("pen_arc", "length_px"), 100.0, r"beyond the reach of the pen arm"),
    ],
)
def test_bad_specs_raise_naming_the_field(base: str, path: tuple[Any, ...], value: Any, message: str) -> None:
    bases = {
        "cartesian": _cartesian_spec,
        "circular": _circular_spec,
        "strip_speed": _strip_spec,
        "curvilinear": _drum_spec,
    }
    with pytest.raises(ScienceInputError, match=message):
        build_calibration(_spec_with(bases[base](), path, value))


def test_a_spec_must_be_an_object() -> None:
    with pytest.raises(ScienceInputError, match=r"^calibration: expected an object"):
        build_calibration([1, 2])  # type: ignore[arg-type]


def _numeric_paths(obj: Any, path: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
    if isinstance(obj, dict):
        return [p for key, value in obj.items() for p in _numeric_paths(value, (*path, key))]
    if isinstance(obj, list):
        return [p for index, value in enumerate(obj) for p in _numeric_paths(value, (*path, index))]
    return [path] if isinstance(obj, int | float) and not isinstance(obj, bool) else []


SPEC_MAKERS = {
    "cartesian": _cartesian_spec,
    "circular": _circular_spec,
    "strip_speed": _strip_spec,
    "curvilinear": _drum_spec,
    "circular, clicked arm": lambda: _clicked_arm_spec(_circular_spec(), wobble_px=0.4),
    "curvilinear, clicked arm": lambda: _clicked_arm_spec(_drum_spec(1.5), wobble_px=0.4),
}
BAD_NUMBERS = [math.nan, math.inf, -math.inf, 0.0, -1.0, 1e308, -1e308, 1e-308, 5e-324, 1e15, -1e15]


@settings(max_examples=200, deadline=None)
@given(kind=st.sampled_from(sorted(SPEC_MAKERS)), pick=st.integers(0, 10_000), bad=st.sampled_from(BAD_NUMBERS))
def test_bad_numbers_never_crash(kind: str, pick: int, bad: float) -> None:
    """Any number of any spec replaced by NaN, infinity, zero, negative, huge or tiny: the result is a
    calibration (whose mapping of absurd points gives NaN/inf quietly) or a ScienceInputError; never another
    exception or a floating-point warning (warnings are errors in this suite)."""
    base = SPEC_MAKERS[kind]()
    paths = _numeric_paths(base)
    try:
        mapping = build_calibration(_spec_with(base, paths[pick % len(paths)], bad))
    except ScienceInputError:
        return
    json.dumps(mapping.residual_report.to_dict(), allow_nan=False)
    values = mapping.pixels_to_values([[500.0, 500.0], [1e9, -1e9], [np.nan, 1.0]])
    with contextlib.suppress(ScienceInputError):  # a far pixel can read 0 on a log axis, which has no pixel
        mapping.values_to_pixels(np.nan_to_num(values, nan=1.0, posinf=1.0, neginf=1.0))
