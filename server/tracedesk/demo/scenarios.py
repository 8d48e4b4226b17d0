"""The demo archive's content: an invented water authority and test laboratory, their records and plans.

Everything here is invented for the demo: the organisations, sites, people and every number. Each sheet's
pens write a :class:`~tracedesk.demo.signals.Signal` whose parameters are drawn from a fixed seed, so the
same sheet (and its truth) comes out of every run, and the truth is known without rendering the image.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from datetime import date
from functools import cache
from typing import Any

import numpy as np

from tracedesk.demo.cartesian_chart import (
    CartesianDesign,
    ChartAxis,
    Lettering,
    PenSpec,
    cartesian_warp,
    log_decade_lines,
    render_cartesian_chart,
)
from tracedesk.demo.circular_chart import CircularDesign, circular_warp, render_circular_chart
from tracedesk.demo.compose import Ageing, Stain
from tracedesk.demo.signals import Bump, Decay, Signal, Step, Wave
from tracedesk.demo.truth import RenderedSheet

WATER_AUTHORITY = "Brackenfold Valley Water Authority"
LABORATORY = "Fenwold Materials Test Laboratory"
DEMO_DPI = 200.0


@dataclass(frozen=True)
class DemoCollection:
    """A demo collection (created with ``is_demo=True``)."""

    key: str
    name: str
    description: str
    site: str
    instrument: str
    period_start: date
    period_end: date
    notes: str = ""


@dataclass(frozen=True)
class DemoPen:
    """A pen of a demo sheet: what it records, ink, the signal it writes and over which span of x."""

    name: str
    unit: str
    colour: str
    signal: Signal
    span: tuple[float, float]


@dataclass(frozen=True)
class FitPlan:
    """A fit the demo makes of a pen's trace: family and options as the fit service takes them."""

    pen: str
    family: str
    options: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class DemoSheet:
    """One demo sheet, how far the demo digitizes it, and where it stands in the review workflow.

    ``stage`` is one of "uploaded", "calibrated", "traced", "fitted"; ``trace_mode`` "auto" or "manual";
    ``workflow`` the task state the demo takes the sheet's task to ("open", "in_progress", "submitted",
    "returned", "approved", "withdrawn"), with ``workflow_reason`` for a return or withdrawal and
    ``review_comment`` pinned to the sheet at the pen's point at ``comment_at`` (x units). ``full_scale`` is the
    value axis' span in chart units: value units, or decades when ``log_scale``.
    """

    key: str
    collection: str
    filename: str
    source_ref: str
    recorded_from: str
    recorded_to: str
    station: str
    tags: tuple[str, ...]
    pens: tuple[DemoPen, ...]
    render: Callable[[float], RenderedSheet]
    x_unit: str
    stage: str = "uploaded"
    trace_mode: str = "auto"
    digitizer: str = "tech_a"
    fits: tuple[FitPlan, ...] = ()
    workflow: str = "open"
    assigned: bool = True
    workflow_reason: str = ""
    review_comment: str = ""
    comment_at: float = 0.0
    manual_step: float = 1.5
    manual_skip: tuple[float, float] | None = None
    full_scale: float = 1.0
    log_scale: bool = False

    def pen(self, name: str) -> DemoPen:
        """The pen called ``name``."""
        for pen in self.pens:
            if pen.name == name:
                return pen
        raise KeyError(name)


COLLECTIONS = (
    DemoCollection(
        key="level",
        name="Demo - Tollwick Reservoir level charts, 1987",
        description=f"{WATER_AUTHORITY}: weekly circular charts of the reservoir level (invented demo records).",
        site="Tollwick Reservoir",
        instrument="7-day circular level recorder, float and pen arm, 12 in charts",
        period_start=date(1987, 3, 2),
        period_end=date(1987, 3, 23),
        notes="Demo data rendered by Tracedesk; the known truth is in each sheet's notes.",
    ),
    DemoCollection(
        key="pressure",
        name="Demo - Quarry Lane pumping station pressures, 1986",
        description=f"{WATER_AUTHORITY}: daily strip charts, two pens: discharge and district pressure (demo).",
        site="Quarry Lane pumping station",
        instrument="two-pen strip-chart recorder, 10 mm/h, 0-10 bar",
        period_start=date(1986, 7, 14),
        period_end=date(1986, 7, 17),
        notes="Demo data rendered by Tracedesk; the known truth is in each sheet's notes.",
    ),
    DemoCollection(
        key="decay",
        name="Demo - Fenwold laboratory pressure decay tests, 1991",
        description=f"{LABORATORY}: pressure decay of seal samples, plotted on semi-log paper (demo).",
        site="Fenwold laboratory, test bay 2",
        instrument="X-Y recorder on 3-cycle semi-log paper",
        period_start=date(1991, 5, 6),
        period_end=date(1991, 5, 7),
        notes="Demo data rendered by Tracedesk; the known truth is in each sheet's notes.",
    ),
)


def _level_signal(week: int) -> Signal:
    rng = np.random.default_rng(1000 + week)
    bumps = (Bump(-1.3, 82.0, 3.0),) if week == 1 else ()
    return Signal(
        offset=round(7.0 + rng.uniform(-0.6, 0.6), 3),
        slope=round(rng.uniform(-0.006, 0.006), 5),
        waves=(
            Wave(round(rng.uniform(0.8, 1.2), 3), 24.0, round(rng.uniform(0, 2 * math.pi), 3)),
            Wave(round(rng.uniform(0.2, 0.4), 3), 12.0, round(rng.uniform(0, 2 * math.pi), 3)),
        ),
        bumps=bumps,
    )


LEVEL_DESIGN = CircularDesign(
    title=("BRACKENFOLD VALLEY", "WATER AUTHORITY", "LEVEL 0-12 m", "7 DAY CHART BV-712"),
    pen_name="Reservoir level",
    unit="m",
)


def _level_sheet(week: int, **plan: Any) -> DemoSheet:
    signal = _level_signal(week)
    day = 2 + 7 * week
    design = replace(LEVEL_DESIGN, note=f"Tollwick Res.  {day} Mar 87  08:00")
    span = (0.35, 167.5)
    stains = (Stain((0.72, 0.28), 28.0, 0.3),) if week == 1 else (Stain((0.2, 0.8), 22.0, 0.18),)

    def render(dpi: float) -> RenderedSheet:
        warp = circular_warp(
            design,
            dpi=dpi,
            rotation_deg=(0.6, -1.1, 0.3)[week],
            shrink=(0.998, 0.997, 0.999)[week],
            offset_mm=((0.8, -0.5), (-0.6, 0.4), (0.3, 0.9))[week],
        )
        return render_circular_chart(
            design, signal, span_hours=span, warp=warp, ageing=Ageing(stains=stains), dpi=dpi, seed=2000 + week
        )

    return DemoSheet(
        key=f"level-w{10 + week}",
        collection="level",
        filename=f"tollwick-level-1987-week{10 + week}.jpg",
        source_ref=f"Box TR-87 / folder 3 / chart {10 + week}",
        recorded_from=f"1987-03-{day:02d}T08:00+00:00",
        recorded_to=f"1987-03-{day + 7:02d}T08:00+00:00",
        station="Tollwick Reservoir, outlet tower",
        tags=("demo", "circular", "reservoir level"),
        pens=(DemoPen("Reservoir level", "m", design.pen_colour, signal, span),),
        render=render,
        x_unit="h",
        full_scale=LEVEL_DESIGN.value_max - LEVEL_DESIGN.value_min,
        **plan,
    )


def _pressure_signals(day: int) -> tuple[Signal, Signal]:
    rng = np.random.default_rng(3000 + day)
    off_at, on_at = round(6.0 + rng.uniform(-0.5, 0.5), 2), round(22.0 + rng.uniform(-0.6, 0.4), 2)
    high, low = round(6.5 + rng.uniform(-0.3, 0.3), 2), round(3.1 + rng.uniform(-0.2, 0.2), 2)
    discharge = Signal(
        offset=high,
        waves=(Wave(0.12, 3.0, round(rng.uniform(0, 2 * math.pi), 3)),),
        steps=(Step(low - high, off_at, 0.25), Step(high - low, on_at, 0.25)),
    )
    district = Signal(
        offset=round(4.7 + rng.uniform(-0.2, 0.2), 2),
        waves=(Wave(0.25, 24.0, round(rng.uniform(0, 2 * math.pi), 3)),),
        bumps=(Bump(-0.9, round(7.5 + rng.uniform(-0.4, 0.4), 2), 1.2), Bump(-0.7, 19.0, 1.5)),
    )
    return discharge, district


def _pressure_design(day: int) -> CartesianDesign:
    hours = tuple(float(h) for h in range(25))
    bars = tuple(float(b) for b in range(11))
    return CartesianDesign(
        kind="strip",
        paper_mm=(280.0, 230.0),
        box_mm=(22.0, 30.0, 262.0, 210.0),
        x_axis=ChartAxis(
            0.0,
            24.0,
            "time",
            hours,
            tuple(h / 4 for h in range(97) if h % 4),
            tuple((h, f"{int(h):02d}") for h in hours[::2]),
        ),
        y_axis=ChartAxis(
            0.0,
            10.0,
            "linear",
            bars,
            tuple(b / 5 for b in range(51) if b % 5),
            tuple((b, f"{int(b)}") for b in bars),
            unit="bar",
        ),
        pens=(PenSpec("Discharge pressure", "bar", "#1f4e9c"), PenSpec("District pressure", "bar", "#b3262b")),
        control_values=(
            (0.0, 0.0),
            (24.0, 0.0),
            (24.0, 10.0),
            (0.0, 10.0),
            (12.0, 5.0),
            (6.0, 2.0),
            (18.0, 8.0),
            (6.0, 8.0),
            (18.0, 2.0),
        ),
        lettering=(
            Lettering("BRACKENFOLD VALLEY WATER AUTHORITY  -  QUARRY LANE PUMPING STATION", (22.0, 14.0), 3.4, "lm"),
            Lettering(
                "PRESSURE  0-10 bar   CHART SPEED 10 mm/h   PEN 1 BLUE: DISCHARGE   PEN 2 RED: DISTRICT",
                (22.0, 19.5),
                2.6,
                "lm",
            ),
            Lettering("CHART No. QL-2410", (262.0, 14.0), 2.8, "rm"),
        ),
        note=f"{14 + day}/7/86   pumps 2 + 3   - R.",
        note_at_mm=(150.0, 219.0),
        sprocket_pitch_mm=8.0,
    )


def _pressure_sheet(day: int, **plan: Any) -> DemoSheet:
    discharge, district = _pressure_signals(day)
    design = _pressure_design(day)
    spans = ((0.05, 23.9), (0.05, 23.9))
    stains = (Stain((0.78, 0.62), 24.0, 0.28),) if day == 0 else ()

    def render(dpi: float) -> RenderedSheet:
        warp = cartesian_warp(
            design,
            dpi=dpi,
            rotation_deg=(0.45, -0.7, 0.9)[day],
            shrink=((0.996, 0.991), (0.997, 0.993), (0.995, 0.990))[day],
            offset_mm=((0.4, 0.6), (-0.5, 0.2), (0.3, -0.4))[day],
            bow=(0.002, 0.003, 0.0015)[day],
        )
        return render_cartesian_chart(
            design,
            (discharge, district),
            spans=spans,
            warp=warp,
            ageing=Ageing(stains=stains, tint=(0.95, 0.93, 0.86)),
            dpi=dpi,
            seed=4000 + day,
        )

    return DemoSheet(
        key=f"pressure-d{14 + day}",
        collection="pressure",
        filename=f"quarry-lane-pressure-1986-07-{14 + day}.jpg",
        source_ref=f"Box QL-86-07 / roll 2 / day {14 + day}",
        recorded_from=f"1986-07-{14 + day}T00:00+01:00",
        recorded_to=f"1986-07-{15 + day}T00:00+01:00",
        station="Quarry Lane pumping station, main header",
        tags=("demo", "strip chart", "pressure"),
        pens=(
            DemoPen("Discharge pressure", "bar", "#1f4e9c", discharge, spans[0]),
            DemoPen("District pressure", "bar", "#b3262b", district, spans[1]),
        ),
        render=render,
        x_unit="h",
        full_scale=10.0,
        **plan,
    )


def _decay_design(run: int) -> CartesianDesign:
    major, minor = log_decade_lines(1.0, 1000.0)
    minutes = tuple(float(m) for m in range(0, 61, 10))
    return CartesianDesign(
        kind="plot",
        paper_mm=(297.0, 210.0),
        box_mm=(32.0, 28.0, 272.0, 178.0),
        x_axis=ChartAxis(
            0.0,
            60.0,
            "linear",
            minutes,
            tuple(float(m) for m in range(0, 61, 2) if m % 10),
            tuple((m, f"{int(m)}") for m in minutes),
            unit="min",
        ),
        y_axis=ChartAxis(1.0, 1000.0, "log10", major, minor, tuple((v, f"{int(v)}") for v in major), unit="kPa"),
        pens=(PenSpec("Vessel pressure", "kPa", "#232323", 0.3),),
        control_values=(
            (0.0, 1.0),
            (60.0, 1.0),
            (60.0, 1000.0),
            (0.0, 1000.0),
            (30.0, 10.0),
            (30.0, 100.0),
            (10.0, 1000.0),
            (50.0, 1.0),
        ),
        lettering=(
            Lettering("FENWOLD MATERIALS TEST LABORATORY", (32.0, 12.0), 3.8, "lm"),
            Lettering(f"PRESSURE DECAY TEST  -  VESSEL 4  -  SEAL SAMPLE F-{17 + run}", (32.0, 18.5), 2.8, "lm"),
            Lettering("TIME, min", (152.0, 190.0), 3.0),
            Lettering("PRESSURE, kPa (abs)", (12.0, 103.0), 3.0, "mm", angle_deg=-90.0),
            Lettering("3 CYCLES x 60 DIVISIONS", (272.0, 12.0), 2.4, "rm"),
        ),
        grid_colour="#4f7fb4",
        note=f"Run {3 + run}   seal F-{17 + run}   20 C   ok  - N.P.",
        note_at_mm=(205.0, 196.0),
    )


def _decay_signal(run: int) -> Signal:
    rng = np.random.default_rng(5000 + run)
    return Signal(
        offset=round(3.0 + rng.uniform(0.0, 2.0), 2),
        decays=(Decay(round(600.0 + rng.uniform(-30, 30), 1), round(8.5 + 4.0 * run + rng.uniform(-0.5, 0.5), 2)),),
    )


def _decay_sheet(run: int, **plan: Any) -> DemoSheet:
    signal = _decay_signal(run)
    design = _decay_design(run)
    span = (0.4, 58.5)

    def render(dpi: float) -> RenderedSheet:
        warp = cartesian_warp(
            design,
            dpi=dpi,
            rotation_deg=(-0.4, 0.55)[run],
            shrink=((0.998, 0.996), (0.997, 0.995))[run],
            offset_mm=((0.5, 0.3), (-0.3, 0.6))[run],
            bow=0.0,
        )
        return render_cartesian_chart(
            design,
            (signal,),
            spans=(span,),
            warp=warp,
            ageing=Ageing(tint=(0.965, 0.955, 0.915), foxing_spots=5),
            dpi=dpi,
            seed=6000 + run,
        )

    return DemoSheet(
        key=f"decay-run{3 + run}",
        collection="decay",
        filename=f"fenwold-decay-test-1991-run{3 + run}.jpg",
        source_ref=f"Lab book 91-2 / test report TR-{114 + run}",
        recorded_from=f"1991-05-{6 + run:02d}T10:{15 + 5 * run}+01:00",
        recorded_to=f"1991-05-{6 + run:02d}T11:{15 + 5 * run}+01:00",
        station="Test bay 2, vessel 4",
        tags=("demo", "log scale", "decay test"),
        pens=(DemoPen("Vessel pressure", "kPa", "#232323", signal, span),),
        render=render,
        x_unit="min",
        full_scale=3.0,  # decades of the log10 value axis
        log_scale=True,
        **plan,
    )


RETURN_COMMENT = (
    "Around Thursday 18:00 the manual trace cuts the corner of the dip: the vertices skip it. Please add "
    "vertices along the dip and check its lowest point against the scan before submitting again."
)
RETURN_REASON = "The Thursday evening dip is not traced closely enough; see the comment pinned on the sheet."
WITHDRAW_REASON = "Roll torn between 09:00 and 13:00; the station logbook readings are used for this day instead."


@cache
def demo_sheets() -> tuple[DemoSheet, ...]:
    """Every demo sheet, with what the demo does to it."""
    return (
        _level_sheet(
            0,
            stage="fitted",
            trace_mode="auto",
            digitizer="tech_a",
            workflow="approved",
            fits=(FitPlan("Reservoir level", "fourier", {"degree": 2, "period": 24}),),
        ),
        _level_sheet(
            1,
            stage="fitted",
            trace_mode="manual",
            digitizer="tech_b",
            workflow="returned",
            fits=(FitPlan("Reservoir level", "spline"),),
            manual_skip=(78.0, 86.0),
            review_comment=RETURN_COMMENT,
            comment_at=82.0,
            workflow_reason=RETURN_REASON,
        ),
        _level_sheet(2, digitizer="tech_a", workflow="open"),
        _pressure_sheet(
            0,
            stage="fitted",
            trace_mode="auto",
            digitizer="tech_b",
            workflow="submitted",
            fits=(
                FitPlan("Discharge pressure", "spline"),
                FitPlan("District pressure", "fourier", {"degree": 3, "period": 24}),
            ),
        ),
        _pressure_sheet(1, stage="calibrated", digitizer="tech_a", workflow="in_progress"),
        _pressure_sheet(2, digitizer="tech_b", workflow="withdrawn", assigned=False, workflow_reason=WITHDRAW_REASON),
        _decay_sheet(
            0,
            stage="fitted",
            trace_mode="auto",
            digitizer="tech_b",
            workflow="submitted",
            fits=(FitPlan("Vessel pressure", "exponential"),),
        ),
        _decay_sheet(1, stage="traced", trace_mode="auto", digitizer="tech_a", workflow="in_progress"),
    )


def demo_sheet_by_filename(filename: str) -> DemoSheet | None:
    """The demo sheet with this file name, if it is one."""
    for sheet in demo_sheets():
        if sheet.filename == filename:
            return sheet
    return None


def collection_of(key: str) -> DemoCollection:
    """The demo collection with this key."""
    for collection in COLLECTIONS:
        if collection.key == key:
            return collection
    raise KeyError(key)
