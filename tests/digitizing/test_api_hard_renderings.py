"""Digitizing hard cartesian renderings end to end through the HTTP API, against the functions they were drawn from.

Three sheets, each uploaded, calibrated with clicked control points, auto-traced, fitted and resampled through
/api/v1 only:

* a scan turned 2 degrees on the scanner and saved as JPEG (quality 80), with a printed grid in a third colour
  and two pens of different colours crossing each other several times;
* a chart with a log10 value axis over four decades (JPEG, quality 90);
* an ordinary matplotlib plot (axes, ticks, labels, grid), where the true pixel position of the pen is taken from
  matplotlib's own data -> display transform (``Axes.transData``), not from any of our code.

Truth: the known functions below, drawn by matplotlib (Agg) through tests/science/chart_render.py, which places
chart values at exactly known sheet pixels (ARCHITECTURE.md pixel convention); the 2-degree turn is applied to
the truth by the same rotation (``rotate_image``). Targets: issue 3's, as collected in
tests/digitizing/api_steps.py, including the per-sample uncertainty covering the reading error (k = 2, at least
95 % of samples). Measured (sqlite): vertices 0.05-0.11 px RMS, samples 0.013-0.03 % of full scale RMS, fitted
curves at most 0.03 % of full scale off.
"""

from __future__ import annotations

from functools import lru_cache
from typing import Any, NamedTuple

import numpy as np
import pytest
from fastapi.testclient import TestClient
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from numpy.typing import NDArray

from tests.digitizing.api_steps import (
    FIT_MAX_FS,
    SAMPLE_MAX_FS,
    SAMPLE_RMS_FS,
    VERTEX_RMS_PX,
    assert_fit_matches,
    assert_samples_match,
    auto_trace,
    create_fit,
    encoded,
    pen_colour_at,
    put_calibration,
    reading_sigma,
    resampled_csv,
    rms,
    trace_arrays,
    upload_sheet,
)
from tests.science.chart_render import GridLines, LinearChartMapping, PenStroke, distance_to_polyline, render_sheet
from tests.science.chart_render import rotate_image as turn_on_scanner

FloatArray = NDArray[np.float64]
SheetFile = tuple[bytes, str, str]


def _slope(function: Any, x: FloatArray, step: float = 1e-4) -> FloatArray:
    return np.asarray((function(x + step) - function(x - step)) / (2.0 * step), dtype=np.float64)


def _control_points(pixel_of: Any, grid: list[tuple[float, float]], *, seed: int) -> list[dict[str, Any]]:
    """Clicks on printed grid crossings, each off by a seeded 0.15 px (sd) as a careful technician at zoom is."""
    noise = np.random.default_rng(seed).normal(0.0, 0.15, (len(grid), 2))
    pixels = pixel_of(np.array(grid)) + noise
    return [{"pixel": p.tolist(), "value": list(value)} for p, value in zip(pixels, grid, strict=True)]


def _cartesian(points: list[dict[str, Any]], *, y_scale: str, unit: str) -> dict[str, Any]:
    return {
        "kind": "cartesian",
        "x_axis": {"scale": "time"},
        "y_axis": {"scale": y_scale, "unit": unit},
        "control_points": points,
        "transform": "auto",
    }


@pytest.fixture
def tech(signed_in: dict[str, TestClient]) -> TestClient:
    return signed_in["technician"]


# --- (a) a turned JPEG scan with two crossing pens ------------------------------------------------------------

SCAN = LinearChartMapping(x_range=(0.0, 24.0), y_range=(0.0, 100.0), box_px=(100.0, 80.0, 1300.0, 830.0))
SCAN_SIZE = (1400, 900)
SCAN_FULL_SCALE = 100.0
TURN_DEG = 2.0
BLUE, RED, GRID_SALMON = "#1f3cc8", "#c81e3c", "#e8a48c"


def blue_truth(x: FloatArray) -> FloatArray:
    return 55.0 + 25.0 * np.sin(2 * np.pi * x / 24.0) + 8.0 * np.cos(2 * np.pi * 3 * x / 24.0)


def red_truth(x: FloatArray) -> FloatArray:
    return 20.0 + 2.5 * x


class TurnedScan(NamedTuple):
    file: SheetFile
    pens: dict[str, FloatArray]  # pen colour -> true polyline on the turned scan (px)
    turn: Any  # original sheet pixels -> turned scan pixels


@lru_cache(maxsize=1)
def turned_scan() -> TurnedScan:
    strokes = [
        PenStroke.from_function(truth, mapping=SCAN, x_range=(0.0, 24.0), colour=colour, width_px=2.5)
        for truth, colour in ((blue_truth, BLUE), (red_truth, RED))
    ]
    hours, tenths = np.linspace(100.0, 1300.0, 25), np.linspace(80.0, 830.0, 21)
    grid = GridLines(u_positions=list(hours), v_positions=list(tenths), colour=GRID_SALMON)
    flat = render_sheet(width_px=SCAN_SIZE[0], height_px=SCAN_SIZE[1], strokes=strokes, grid=grid)
    turned, turn = turn_on_scanner(flat, angle_deg=TURN_DEG)
    pens = {stroke.colour: turn(stroke.points_uv) for stroke in strokes}
    return TurnedScan(encoded(turned, jpeg_quality=80), pens, turn)


def _trace_turned_pen(client: TestClient, scan: TurnedScan, colour: str, truth: Any) -> dict[str, Any]:
    """Upload, calibrate on 15 grid crossings, sample the pen's ink where it is alone, trace the chart box."""
    sheet_id = upload_sheet(client, scan.file, collection="Kiln room thermographs")
    crossings = [(x, y) for x in (0.0, 6.0, 12.0, 18.0, 24.0) for y in (0.0, 50.0, 100.0)]
    pixel_of = lambda xy: scan.turn(SCAN.data_to_pixel(xy[:, 0], xy[:, 1]))  # noqa: E731
    spec = _cartesian(_control_points(pixel_of, crossings, seed=3), y_scale="linear", unit="degC")
    calibration = put_calibration(client, sheet_id, spec)
    assert calibration["transform"] in ("similarity", "affine")
    assert calibration["rms_px"] < 0.4  # clicks off by 0.15 px (sd) per axis: about 0.2 px RMS
    ink = pen_colour_at(client, sheet_id, pixel_of(np.array([[3.0, float(truth(3.0))]]))[0])
    corners = scan.turn(np.array([[100.0, 80.0], [1300.0, 80.0], [1300.0, 830.0], [100.0, 830.0]]))
    box = [*(corners.min(axis=0) - 12.0), *(corners.max(axis=0) + 12.0)]
    return auto_trace(client, sheet_id, name=f"pen {colour}", unit="degC", colour=ink, region={"box": box})


@pytest.mark.parametrize(
    ("colour", "truth", "fit_request"),
    [
        (BLUE, blue_truth, {"family": "fourier", "degree": 3, "period": 24}),
        (RED, red_truth, {"family": "polynomial", "degree": 1}),
    ],
)
def test_turned_jpeg_scan_with_two_crossing_pens(
    tech: TestClient, colour: str, truth: Any, fit_request: dict[str, Any]
) -> None:
    scan = turned_scan()
    trace = _trace_turned_pen(tech, scan, colour, truth)
    vertices, samples, sigma = trace_arrays(tech, trace["id"])
    # Judged away from the crossings (6 px from the other pen) and 2 px inside the pen's butt-capped ends.
    ends = scan.pens[colour][[0, -1], 0]
    other = scan.pens[RED if colour == BLUE else BLUE]
    clear = distance_to_polyline(vertices, other) > 6.0
    clear &= (vertices[:, 0] > ends[0] + 2.0) & (vertices[:, 0] < ends[1] - 2.0)
    assert clear.sum() > 0.8 * (ends[1] - ends[0])  # about one vertex per pixel column
    distance = distance_to_polyline(vertices, scan.pens[colour])
    assert rms(distance[clear]) < VERTEX_RMS_PX
    assert distance.max() < 2.0  # even where the pens cross, the trace keeps to its own pen
    error = samples[:, 1] - truth(samples[:, 0])
    sigma_reading = reading_sigma(sigma, _slope(truth, samples[:, 0]))
    assert_samples_match(error[clear], sigma_reading[clear], full_scale=SCAN_FULL_SCALE)

    fit = create_fit(tech, trace["id"], fit_request)
    assert_fit_matches(fit, truth, full_scale=SCAN_FULL_SCALE)
    header, grid_x, values = resampled_csv(tech, trace["id"], step=0.25, method="fit", fit_id=fit["id"])
    assert header[:2] == ["x [h]", f"pen {colour} [degC]"]
    assert np.max(np.abs(values - truth(grid_x))) < FIT_MAX_FS * SCAN_FULL_SCALE
    _, grid_x, values = resampled_csv(tech, trace["id"], step=0.25, method="pchip")  # crossings included
    assert np.max(np.abs(values - truth(grid_x))) < SAMPLE_MAX_FS * SCAN_FULL_SCALE


# --- (b) a log10 value axis over four decades -----------------------------------------------------------------

DECADES = LinearChartMapping(x_range=(0.0, 12.0), y_range=(0.0, 4.0), box_px=(100.0, 60.0, 1100.0, 860.0))
LOG_SIZE = (1200, 920)
LOG_FULL_SCALE_DECADES = 4.0
GREEN, GRID_BLUE = "#1b6e3a", "#9db8d9"


def decay_truth(x: FloatArray) -> FloatArray:
    """A drying curve, 8020 down to 56 g/m^3 over 12 h."""
    return 8000.0 * np.exp(-0.45 * x) + 20.0


@lru_cache(maxsize=1)
def log_chart() -> tuple[SheetFile, FloatArray]:
    """The chart (JPEG, quality 90) and the pen's true polyline; printed lines at 1..9 x 10^k and every hour."""
    pen = PenStroke.from_function(
        lambda x: np.log10(decay_truth(x)), mapping=DECADES, x_range=(0.0, 12.0), colour=GREEN, width_px=2.0
    )
    printed = np.log10([k * 10.0**d for d in range(4) for k in range(1, 10)] + [1e4])
    rows = DECADES.data_to_pixel(np.zeros(len(printed)), printed)[:, 1]
    grid = GridLines(u_positions=list(np.linspace(100.0, 1100.0, 13)), v_positions=list(rows), colour=GRID_BLUE)
    pixels = render_sheet(width_px=LOG_SIZE[0], height_px=LOG_SIZE[1], strokes=[pen], grid=grid)
    return encoded(pixels, jpeg_quality=90), pen.points_uv


def test_log10_axis_chart(tech: TestClient) -> None:
    """Errors on a log axis are measured in decades (its chart coordinate): 0.1 % of full scale is 0.004 decade."""
    file, pen = log_chart()
    sheet_id = upload_sheet(tech, file, collection="Drying trials")
    crossings = [(x, y) for x in (0.0, 6.0, 12.0) for y in (1.0, 100.0, 10000.0)]
    pixel_of = lambda xy: DECADES.data_to_pixel(xy[:, 0], np.log10(xy[:, 1]))  # noqa: E731
    spec = _cartesian(_control_points(pixel_of, crossings, seed=4), y_scale="log10", unit="g/m3")
    assert put_calibration(tech, sheet_id, spec)["transform"] in ("similarity", "affine")
    ink = pen_colour_at(tech, sheet_id, pen[len(pen) // 2])
    trace = auto_trace(tech, sheet_id, name="humidity", unit="g/m3", colour=ink, region={"box": [90, 50, 1110, 870]})
    vertices, samples, sigma = trace_arrays(tech, trace["id"])

    inside = (vertices[:, 0] > pen[0, 0] + 2.0) & (vertices[:, 0] < pen[-1, 0] - 2.0)
    assert rms(distance_to_polyline(vertices[inside], pen)) < VERTEX_RMS_PX
    decades = np.log10(samples[:, 1]) - np.log10(decay_truth(samples[:, 0]))
    # sigma_y is in g/m3; in decades it is sigma_y / (y ln 10) (first-order propagation, GUM 5.1.2).
    sigma_decades = np.column_stack([sigma[:, 0], sigma[:, 1] / (samples[:, 1] * np.log(10.0))])
    sigma_reading = reading_sigma(sigma_decades, _slope(lambda x: np.log10(decay_truth(x)), samples[:, 0]))
    assert_samples_match(decades[inside], sigma_reading[inside], full_scale=LOG_FULL_SCALE_DECADES)

    fit = create_fit(tech, trace["id"], {"family": "exponential"})
    assert_fit_matches(fit, decay_truth, full_scale=LOG_FULL_SCALE_DECADES, chart=np.log10)
    # Honest uncertainty: the truth (decay_truth's a, b and c) lies within 3 standard errors of the fit. The
    # covariance allows for errors correlated along the trace (residual-based HAC) plus the calibration's own
    # uncertainty: a log-axis calibration offset is shared by all samples (a relative error in a), which no
    # residual-based estimator can see (propagated from the control-point clicks, JCGM 100:2008 GUM 5.2).
    truth = {"a": 8000.0, "b": -0.45, "c": 20.0}
    assert all(abs(fit["coefficients"][k] - v) <= 3.0 * fit["standard_errors"][k] for k, v in truth.items()), fit
    assert 0.0 < fit["stats"]["calibration_share"] <= 1.0
    assert fit["stats"]["covariance_estimator"] == "hac_newey_west_prewhitened"
    header, grid_x, values = resampled_csv(tech, trace["id"], step=0.5, method="linear")
    assert header[:2] == ["x [h]", "humidity [g/m3]"]
    off = np.log10(values) - np.log10(decay_truth(grid_x))
    assert np.max(np.abs(off)) < SAMPLE_MAX_FS * LOG_FULL_SCALE_DECADES


# --- (d) sub-pixel vertices on an ordinary matplotlib plot -----------------------------------------------------

PLOT_SIZE = (1000, 600)  # 10 x 6 in at 100 dpi
PLOT_PEN = "#1f3cc8"
PLOT_FULL_SCALE = 4.0  # y from -2 to 2


def wave_truth(x: FloatArray) -> FloatArray:
    return 1.5 * np.sin(1.3 * x) * np.exp(-x / 10.0) + 0.15 * x - 0.7


class OrdinaryPlot(NamedTuple):
    file: SheetFile
    pen: FloatArray  # true pen centre line (px), from Axes.transData
    to_pixels: Any  # (n, 2) data -> (n, 2) sheet pixels, from Axes.transData


@lru_cache(maxsize=1)
def ordinary_plot() -> OrdinaryPlot:
    """A plain matplotlib plot (axes, ticks, tick labels, a light grid, a 2 px pen), rendered by Agg.

    matplotlib's display coordinates are pixels from the bottom-left corner of the figure, y up, with pixel
    (i, j) covering [i, i+1) (the convention tests/science/test_tracing_pieces.py checks for the renderer), so
    the sheet pixel of a display point (x_d, y_d) is (x_d, height - y_d).
    """
    figure = Figure(figsize=(PLOT_SIZE[0] / 100, PLOT_SIZE[1] / 100), dpi=100, facecolor="white")
    canvas = FigureCanvasAgg(figure)
    axes = figure.add_axes((0.08, 0.1, 0.88, 0.84))
    x = np.linspace(0.0, 10.0, 4000)
    axes.plot(x, wave_truth(x), color=PLOT_PEN, lw=2.0 * 72 / 100, snap=False)
    axes.set_xlim(0.0, 10.0)
    axes.set_ylim(-2.0, 2.0)
    axes.set_xlabel("time [h]")
    axes.set_ylabel("flow [m3/s]")
    axes.grid(True, color="#d0d0d0", lw=0.6)
    canvas.draw()
    pixels = np.ascontiguousarray(np.asarray(canvas.buffer_rgba())[:, :, :3])
    transform = axes.transData

    def to_pixels(data: FloatArray) -> FloatArray:
        display = transform.transform(np.asarray(data, dtype=np.float64))
        return np.column_stack([display[:, 0], PLOT_SIZE[1] - display[:, 1]])

    return OrdinaryPlot(encoded(pixels), to_pixels(np.column_stack([x, wave_truth(x)])), to_pixels)


def test_vertices_land_on_matplotlibs_own_pixel_positions(tech: TestClient) -> None:
    """Vertices within 0.3 px RMS of the line matplotlib drew, with no half-pixel bias in either direction."""
    plot = ordinary_plot()
    sheet_id = upload_sheet(tech, plot.file, collection="Gauging station plots")
    ticks = [(x, y) for x in (0.0, 2.0, 4.0, 6.0, 8.0, 10.0) for y in (-2.0, 0.0, 2.0)]
    points = [{"pixel": plot.to_pixels(np.array([xy]))[0].tolist(), "value": list(xy)} for xy in ticks]
    spec = _cartesian(points, y_scale="linear", unit="m3/s")
    assert put_calibration(tech, sheet_id, spec)["rms_px"] < 1e-6  # tick pixels are exact here
    ink = pen_colour_at(tech, sheet_id, plot.pen[len(plot.pen) // 3])
    corners = plot.to_pixels(np.array([[0.0, 2.0], [10.0, -2.0]]))
    box = [corners[0, 0] + 1.0, corners[0, 1] + 1.0, corners[1, 0] - 1.0, corners[1, 1] - 1.0]  # inside the spines
    trace = auto_trace(tech, sheet_id, name="flow", unit="m3/s", colour=ink, region={"box": box})
    vertices, samples, _ = trace_arrays(tech, trace["id"])

    inside = (vertices[:, 0] > box[0] + 2.0) & (vertices[:, 0] < box[2] - 2.0)
    assert inside.sum() > 0.95 * (box[2] - box[0] - 4.0)
    assert rms(distance_to_polyline(vertices[inside], plot.pen)) < VERTEX_RMS_PX
    # A trace shifted by (du, dv) is off by dv - slope * du at its own columns: fit both by least squares.
    # A half-pixel slip in the pixel convention would show as 0.5 px in one of them.
    u = vertices[inside, 0]
    slope = np.interp(u, plot.pen[:, 0], np.gradient(plot.pen[:, 1], plot.pen[:, 0]))
    offset_v = vertices[inside, 1] - np.interp(u, plot.pen[:, 0], plot.pen[:, 1])
    (shift_v, shift_u), *_ = np.linalg.lstsq(np.column_stack([np.ones_like(u), -slope]), offset_v, rcond=None)
    assert abs(shift_u) < 0.05 and abs(shift_v) < 0.05, (shift_u, shift_v)
    error = samples[inside, 1] - wave_truth(samples[inside, 0])
    assert rms(error) < SAMPLE_RMS_FS * PLOT_FULL_SCALE
