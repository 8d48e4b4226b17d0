"""Chart specs' printed geometry: line values per scale, JSON round trips and refusals of bad specs.

Reference values are the printed-scale conventions themselves (common practice): a linear or time axis
prints a line every minor step; a log10 axis prints 1, 2, ..., 9 in every decade with the decade lines
major; a sqrt axis prints equal value steps, which lie at sqrt(value) on paper.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.grid_spec import CartesianGridSpec, CircularChartSpec, grid_spec_from_dict

CARTESIAN = {
    "kind": "cartesian",
    "x_axis": {"scale": "time", "frame": [0, 24], "minor_step": 0.5, "major_step": 3, "start": "2024-03-01T00:00Z"},
    "y_axis": {"scale": "linear", "frame": [-5, 45], "minor_step": 2.5, "major_step": 10},
    "grid_colour": "#E0907A",
    "pen_colours": ["#1f3cc8"],
}


def test_linear_axis_lines_and_major_multiples():
    spec = grid_spec_from_dict(CARTESIAN)
    assert isinstance(spec, CartesianGridSpec)
    values, major = spec.y_axis.line_values()
    assert_allclose(values, np.arange(-5.0, 45.01, 2.5), rtol=0, atol=1e-12)
    # Major lines are the whole multiples of the major step, not steps counted from the frame.
    assert_allclose(values[major], [0.0, 10.0, 20.0, 30.0, 40.0], rtol=0, atol=1e-12)


def test_time_axis_keeps_start_for_the_calibration():
    spec = grid_spec_from_dict(CARTESIAN)
    assert isinstance(spec, CartesianGridSpec)
    values, major = spec.x_axis.line_values()
    assert values.size == 49
    assert_allclose(values[major], np.arange(0.0, 24.01, 3.0), rtol=0, atol=1e-12)
    assert spec.x_axis.calibration_axis() == {"scale": "time", "start": "2024-03-01T00:00Z"}
    assert spec.grid_colour == "#e0907a"


def test_log10_axis_prints_mantissas_per_decade():
    spec = grid_spec_from_dict({**CARTESIAN, "y_axis": {"scale": "log10", "frame": [2, 300]}})
    assert isinstance(spec, CartesianGridSpec)
    values, major = spec.y_axis.line_values()
    expected = [2, 3, 4, 5, 6, 7, 8, 9, 10, 20, 30, 40, 50, 60, 70, 80, 90, 100, 200, 300]
    assert_allclose(values, expected, rtol=1e-12)
    assert_allclose(values[major], [10, 100], rtol=1e-12)
    chart, _ = spec.y_axis.line_chart_coordinates()
    assert_allclose(chart, np.log10(expected), rtol=1e-12)


def test_sqrt_axis_lines_lie_at_square_roots():
    spec = grid_spec_from_dict({**CARTESIAN, "y_axis": {"scale": "sqrt", "frame": [0, 100], "minor_step": 25}})
    assert isinstance(spec, CartesianGridSpec)
    chart, major = spec.y_axis.line_chart_coordinates()
    assert_allclose(chart, [0.0, 5.0, np.sqrt(50.0), np.sqrt(75.0), 10.0], rtol=1e-12)
    assert not major.any()


def test_cartesian_round_trip():
    spec = grid_spec_from_dict(CARTESIAN)
    assert grid_spec_from_dict(spec.to_dict()) == spec


def test_circular_spec_ring_radii_and_round_trip():
    spec = grid_spec_from_dict(
        {
            "kind": "circular",
            "value_axis": {"scale": "linear", "frame": [0, 100], "minor_step": 10, "major_step": 50},
            "ring_radii_mm": [25, 125],
            "period_hours": 24,
            "time_line_hours": 1,
            "time_lines": "arcs",
            "arc_radius_mm": 140,
            "grid_colour": "#9cc59a",
        }
    )
    assert isinstance(spec, CircularChartSpec)
    # Rings lie linearly in chart coordinate between the two frame radii: value 30 at 25 + 0.3 * 100 mm.
    assert_allclose(spec.ring_radii_of(np.array([0.0, 30.0, 100.0])), [25.0, 55.0, 125.0], rtol=1e-12)
    assert grid_spec_from_dict(spec.to_dict()) == spec


@pytest.mark.parametrize(
    ("change", "message"),
    [
        ({"x_axis": {"scale": "time", "frame": [0, 24], "minor_step": 0.7}}, "x_axis.frame: the frame spans"),
        ({"x_axis": {"scale": "time", "frame": [24, 0], "minor_step": 1}}, "x_axis.frame: the first frame value"),
        ({"x_axis": {"scale": "time", "frame": [0, 24]}}, "x_axis.minor_step: missing"),
        ({"y_axis": {"scale": "log10", "frame": [0, 100]}}, "y_axis.frame[0]: a log10 axis needs values > 0"),
        ({"y_axis": {"scale": "log10", "frame": [1.5, 100]}}, "y_axis.frame[0]: 1.5 is not one of"),
        ({"y_axis": {"scale": "linear", "frame": [0, 10], "minor_step": 2, "major_step": 3}}, "major_step"),
        ({"y_axis": {"scale": "linear", "frame": [0, 10], "minor_step": 1, "increases": "left"}}, "increases"),
        ({"y_axis": {"scale": "linear", "frame": [0, 1e6], "minor_step": 1}}, "at most 5000"),
        ({"grid_colour": "red"}, "grid_colour"),
        ({"pen_colours": ["#12345"]}, "pen_colours[0]"),
        ({"colour_tolerance": 0}, "colour_tolerance: must be > 0"),
        ({"kind": "polar"}, "kind: expected one of"),
    ],
)
def test_bad_specs_are_refused_with_the_field_path(change, message):
    with pytest.raises(ScienceInputError, match=message.replace("[", r"\[").replace("]", r"\]")):
        grid_spec_from_dict({**CARTESIAN, **change})


def test_line_values_are_exact_for_decimal_steps():
    spec = grid_spec_from_dict({**CARTESIAN, "y_axis": {"scale": "linear", "frame": [0, 1], "minor_step": 0.1}})
    assert isinstance(spec, CartesianGridSpec)
    values, major = spec.y_axis.line_values()
    assert values.size == 11
    assert values[-1] == 1.0
    assert_array_equal(major, np.zeros(11, dtype=bool))
