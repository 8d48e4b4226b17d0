"""Period summaries against hand-computed values, and the WMO step plausibility check.

References: trapezoid rule on a piecewise-linear series computed by hand in the comments; time above a
threshold of a sine, 24 * (1 - 2 * asin(0.5) / pi) / 2 = 8 h per day (closed form); WMO (1993) step
limits as used by the dataresqc R package (REFERENCES.md).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.summaries import (
    WMO_AIR_TEMPERATURE_STEP_LIMITS,
    WMO_PRESSURE_STEP_LIMITS,
    check_successive_changes,
    period_edges,
    summarise_periods,
)

# 0 h: 0, 6 h: 6, 12 h: 12, 18 h: 6, 24 h: 0, 30 h: 10, 36 h: NaN (a gap from 30 h on).
TIMES = np.array([0.0, 6.0, 12.0, 18.0, 24.0, 30.0, 36.0])
VALUES = np.array([0.0, 6.0, 12.0, 6.0, 0.0, 10.0, math.nan])


def test_daily_summary_of_a_piecewise_linear_series() -> None:
    """Day 1: a triangle 0 -> 12 -> 0, area 24 * 12 / 2 = 144 degC*h, mean 6; above 5 degC from 5 h to 19 h."""
    day1, day2 = summarise_periods(TIMES, VALUES, span_hours=24.0, threshold=5.0, unit="degC")
    assert (day1.start, day1.end) == (0.0, 24.0)
    assert day1.integral == pytest.approx(144.0)
    assert day1.integral_unit == "degC*h"
    assert day1.mean == pytest.approx(6.0)
    assert (day1.maximum, day1.maximum_time) == (12.0, 12.0)
    assert (day1.minimum, day1.minimum_time) == (0.0, 0.0)
    assert day1.time_above == pytest.approx(14.0)
    assert day1.time_below == pytest.approx(10.0)
    assert day1.sample_count == 4  # 24 h belongs to day 2: periods are [start, end)
    assert day1.coverage == 1.0
    # Day 2: only 24 -> 30 h is traced (0 -> 10): area 30, mean 5, above 5 from 27 h: 3 h.
    assert day2.coverage == pytest.approx(0.25)
    assert day2.integral == pytest.approx(30.0)
    assert day2.mean == pytest.approx(5.0)
    assert day2.time_above == pytest.approx(3.0)
    assert day2.sample_count == 2


def test_periods_cut_the_trace_at_their_edges() -> None:
    """Six-hour periods from origin 3 h: the first covers 0..3 h of [-3, 3) -> coverage 0.5, area 4.5."""
    summaries = summarise_periods(TIMES[:5], VALUES[:5], span_hours=6.0, origin=3.0)
    assert summaries[0].start == -3.0
    assert summaries[0].coverage == pytest.approx(0.5)
    assert summaries[0].integral == pytest.approx(0.5 * 3 * 3)
    assert summaries[1].integral == pytest.approx(6.0 * 6.0)  # 3..9 h: 3 -> 9 linear, mean 6
    assert summaries[1].maximum == 9.0  # the curve at the period edge 9 h
    assert summaries[1].maximum_time == 9.0


def test_time_above_threshold_of_a_sine() -> None:
    """sin(2 pi t / 24) > 0.5 for 8 h of every day (closed form); dense samples reproduce it."""
    t = np.linspace(0.0, 72.0, 72 * 60 + 1)
    for day in summarise_periods(t, np.sin(2 * np.pi * t / 24), span_hours=24.0, threshold=0.5):
        assert day.time_above == pytest.approx(8.0, abs=1e-3)
        assert day.time_below == pytest.approx(16.0, abs=1e-3)
        assert day.mean == pytest.approx(0.0, abs=1e-6)
        assert day.maximum == pytest.approx(1.0, abs=1e-6)
        assert day.maximum_time is not None
        assert day.maximum_time % 24 == pytest.approx(6.0, abs=1 / 60)


def test_gaps_are_not_summarised() -> None:
    """A span longer than max_gap contributes nothing; an empty period has no values, coverage 0."""
    t = np.array([0.0, 1.0, 2.0, 10.0, 11.0])
    v = np.array([1.0, 1.0, 1.0, 5.0, 5.0])
    whole, empty = summarise_periods(t, v, edges=[0.0, 12.0, 20.0], max_gap=2.0)
    assert whole.coverage == pytest.approx(3.0 / 12.0)
    assert whole.integral == pytest.approx(2.0 + 5.0)
    assert empty.coverage == 0.0
    assert empty.mean is None
    assert empty.maximum is None
    assert empty.sample_count == 0


def test_period_edges_align_to_the_origin() -> None:
    """Day edges from an origin at 6 h covering 10 h .. 40 h."""
    assert period_edges(start=10.0, stop=40.0, span_hours=24.0, origin=6.0).tolist() == [6.0, 30.0, 54.0]
    with pytest.raises(ScienceInputError, match="span_hours must be positive"):
        period_edges(start=0.0, stop=1.0, span_hours=0.0)
    with pytest.raises(ScienceInputError, match="either explicit period edges or span_hours"):
        summarise_periods(TIMES, VALUES)


def test_wmo_step_limits() -> None:
    """WMO (1993) limits: 4 degC in 1 h, 7 in 2 h ...; pressure 3 hPa in 1 h (REFERENCES.md)."""
    assert WMO_AIR_TEMPERATURE_STEP_LIMITS == {1.0: 4.0, 2.0: 7.0, 3.0: 9.0, 6.0: 15.0, 12.0: 25.0}
    assert WMO_PRESSURE_STEP_LIMITS == {1.0: 3.0, 2.0: 6.0, 3.0: 9.0, 6.0: 18.0, 12.0: 36.0}
    times = [0.0, 1.0, 2.0, 3.5, 10.0, 30.0, 31.0, 32.0]
    temperature = [10.0, 14.0, 18.5, 11.0, 30.0, 0.0, math.nan, 8.0]
    flags = check_successive_changes(times, temperature, limits=WMO_AIR_TEMPERATURE_STEP_LIMITS)
    # 0->1 h: +4 (allowed); 1->2 h: +4.5 > 4; 2->3.5 h: -7.5 > 7 (2 h limit); 3.5->10 h: +19 <= 25 (12 h);
    # 10->30 h: longer than 12 h, not checked; 30->32 h across the NaN: +8 > 7 (2 h limit).
    assert [(f.index, f.next_index, f.limit, f.limit_span_hours) for f in flags] == [
        (1, 2, 4.0, 1.0),
        (2, 3, 7.0, 2.0),
        (5, 7, 7.0, 2.0),
    ]
    assert flags[1].change == pytest.approx(-7.5)
