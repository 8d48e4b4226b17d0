"""Axis scales: value <-> linear chart coordinate, and time conversions."""

from __future__ import annotations

import math
from datetime import UTC, datetime, timedelta, timezone

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from tracedesk.science.axes import (
    LinearScale,
    Log10Scale,
    SqrtScale,
    TimeScale,
    datetimes_to_elapsed_hours,
    elapsed_hours_to_iso,
    parse_iso_datetime,
    pixels_per_hour_from_chart_speed,
    scale_from_name,
)
from tracedesk.science.errors import ScienceInputError


def test_log10_chart_coordinates_are_decades() -> None:
    """log10(0.01, 1, 10, 1000) = -2, 0, 1, 3 (definition of the common logarithm)."""
    assert_allclose(Log10Scale().values_to_chart([0.01, 1.0, 10.0, 1000.0]), [-2.0, 0.0, 1.0, 3.0], rtol=0, atol=1e-15)
    assert_allclose(Log10Scale().chart_to_values([-2.0, 0.5]), [0.01, math.sqrt(10.0)], rtol=1e-15)


def test_sqrt_chart_coordinates() -> None:
    """sqrt(0, 4, 2.25) = 0, 2, 1.5 (exact in binary floating point)."""
    assert_allclose(SqrtScale().values_to_chart([0.0, 4.0, 2.25]), [0.0, 2.0, 1.5], rtol=0, atol=0)
    assert_allclose(SqrtScale().chart_to_values([3.0]), [9.0], rtol=0, atol=0)


def test_sqrt_scale_has_no_value_below_its_zero() -> None:
    values = SqrtScale().chart_to_values([-0.1, 0.0])
    assert np.isnan(values[0])
    assert values[1] == 0.0


@pytest.mark.parametrize("bad", [0.0, -1.0, -1e-300])
def test_log10_refuses_non_positive_values(bad: float) -> None:
    with pytest.raises(ScienceInputError, match=r"log10 axis needs values > 0"):
        Log10Scale().values_to_chart([1.0, bad], field="y value")


def test_sqrt_refuses_negative_values_and_names_the_field() -> None:
    with pytest.raises(ScienceInputError, match=r"^control_points y value: a sqrt axis needs values >= 0"):
        SqrtScale().values_to_chart([-4.0], field="control_points y value")


def test_nan_passes_through_every_scale() -> None:
    for scale in (LinearScale(), Log10Scale(), SqrtScale(), TimeScale()):
        assert np.isnan(scale.values_to_chart([np.nan])[0])
        assert np.isnan(scale.chart_to_values([np.nan])[0])


@settings(max_examples=60, deadline=None)
@given(st.floats(min_value=1e-12, max_value=1e12))
def test_log_and_sqrt_round_trips(value: float) -> None:
    for scale in (Log10Scale(), SqrtScale(), LinearScale()):
        back = scale.chart_to_values(scale.values_to_chart([value]))
        assert_allclose(back, [value], rtol=1e-13)


def test_scale_from_name_knows_the_scales_and_refuses_others() -> None:
    assert [scale_from_name(n).name for n in ("linear", "log10", "sqrt", "time")] == ["linear", "log10", "sqrt", "time"]
    with pytest.raises(ScienceInputError, match=r"y_axis.scale: unknown scale 'ln'"):
        scale_from_name("ln", field="y_axis.scale")


def test_iso_date_times_need_an_offset() -> None:
    assert parse_iso_datetime("2024-03-01T06:00:00Z").utcoffset() == timedelta(0)
    with pytest.raises(ScienceInputError, match="no UTC offset"):
        parse_iso_datetime("2024-03-01T06:00:00", field="start")
    with pytest.raises(ScienceInputError, match="not an ISO 8601 date-time"):
        parse_iso_datetime("1 March 2024", field="start")
    with pytest.raises(ScienceInputError, match="offset"):
        TimeScale(start=datetime(2024, 3, 1, 6))  # a naive start


def test_elapsed_hours_across_an_offset_change() -> None:
    """From 12:00+01:00 on 30 March to 12:00+02:00 on 31 March 2024 is 23 h (offsets per ISO 8601)."""
    start = parse_iso_datetime("2024-03-30T12:00:00+01:00")
    later = parse_iso_datetime("2024-03-31T12:00:00+02:00")
    assert_allclose(datetimes_to_elapsed_hours([later], start=start), [23.0], rtol=0, atol=1e-12)


def test_hours_to_iso_keeps_the_start_offset() -> None:
    start = datetime(2024, 1, 15, 8, 0, tzinfo=timezone(timedelta(hours=-5)))
    texts = elapsed_hours_to_iso([0.0, 25.5, np.nan], start=start)
    assert texts == ["2024-01-15T08:00:00-05:00", "2024-01-16T09:30:00-05:00", None]
    scale = TimeScale(start=start)
    assert_allclose(scale.iso_to_hours(["2024-01-16T14:30:00Z"]), [25.5], rtol=0, atol=1e-12)


def test_time_scale_without_start_refuses_date_times() -> None:
    with pytest.raises(ScienceInputError, match="chart start time"):
        TimeScale().iso_to_hours(["2024-01-16T14:30:00Z"], field="control_points[0].value[0]")
    with pytest.raises(ScienceInputError, match="outside the calendar"):
        elapsed_hours_to_iso([1e12], start=datetime(2024, 1, 1, tzinfo=UTC))


def test_pixels_per_hour_from_chart_speed() -> None:
    """20 mm/h scanned at 300 dpi: 20 * 300 / 25.4 = 236.2205 px/h (1 in = 25.4 mm exactly, 1959 definition)."""
    assert_allclose(
        pixels_per_hour_from_chart_speed(chart_speed_mm_per_hour=20.0, scan_dpi=300.0), 236.22047244, rtol=1e-10
    )
    with pytest.raises(ScienceInputError, match="scan_dpi"):
        pixels_per_hour_from_chart_speed(chart_speed_mm_per_hour=20.0, scan_dpi=0.0)
    with pytest.raises(ScienceInputError, match="chart_speed_mm_per_hour"):
        pixels_per_hour_from_chart_speed(chart_speed_mm_per_hour=math.nan, scan_dpi=300.0)
