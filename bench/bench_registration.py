"""Automatic registration from the printed grid on a full A4 sheet at 600 dpi (7000 x 5000 px, RGB).

The sheet is synthesised with numpy (rendering 35 million pixels through matplotlib takes far longer):
a 270 x 180 mm chart with a 1 mm grid (2.4 px minor lines, 6 px major lines every 10 mm), turned by
1.7 degrees about the sheet centre, with a blue pen trace, a translucent stain and scanner noise. Each
pixel's grid coverage is the overlap of the pixel (box filter) with the lines, so the true
intersections are known exactly.

Prints a small table: median wall time of ``detect_cartesian_grid`` over the runs (and its CPU time,
both threads summed: on a busy machine the wall time also counts waiting for a core); one plain full-resolution
pass in the same process (``srgb_to_lab`` of the whole image, the first step of a straightforward
per-pixel colour test) and the ratio; accuracy of the control points against the truth.

Target (issue 9): <= 2 s per sheet on a 2-core machine.

Run: .venv/bin/python bench/bench_registration.py [--runs N] [--skip-reference]
"""

from __future__ import annotations

import argparse
import math
import statistics
import time

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.colour import srgb_to_lab
from tracedesk.science.grid_registration import GridDetection, detect_cartesian_grid
from tracedesk.science.grid_spec import CartesianGridSpec, grid_spec_from_dict

WIDTH, HEIGHT = 7000, 5000
PX_PER_MM = 600 / 25.4
ANGLE_DEG = 1.7
LEFT_MM, TOP_MM = 12.0, 15.0
PAPER = np.array([251.0, 250.0, 245.0])
GRID = np.array([224.0, 144.0, 122.0])
PEN = np.array([31.0, 60.0, 200.0])
SPEC = {
    "kind": "cartesian",
    "x_axis": {"scale": "time", "frame": [0, 27], "minor_step": 0.1, "major_step": 1},
    "y_axis": {"scale": "linear", "frame": [0, 180], "minor_step": 1, "major_step": 10},
    "grid_colour": "#e0907a",
    "pen_colours": ["#1f3cc8"],
}


def _unturned(u: NDArray[np.float64], v: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Sheet pixels -> mm on the unturned chart paper (the sheet is turned clockwise by ANGLE_DEG)."""
    theta = math.radians(ANGLE_DEG)
    du, dv = u - WIDTH / 2.0, v - HEIGHT / 2.0
    back_u = math.cos(theta) * du + math.sin(theta) * dv + WIDTH / 2.0
    back_v = -math.sin(theta) * du + math.cos(theta) * dv + HEIGHT / 2.0
    return back_u / PX_PER_MM, back_v / PX_PER_MM


def _coverage(mm: NDArray[np.float64], step_mm: float, width_px: float, count: int) -> NDArray[np.float64]:
    """Box-filter coverage of lines ``width_px`` wide every ``step_mm`` (``count`` steps) at positions mm."""
    nearest = np.clip(np.round(mm / step_mm), 0, count)
    distance_px = np.abs(mm - nearest * step_mm) * PX_PER_MM
    return np.clip(width_px / 2.0 + 0.5 - distance_px, 0.0, 1.0)


def _rows(first: int, last: int) -> NDArray[np.uint8]:
    v, u = np.mgrid[first:last, 0:WIDTH].astype(np.float64) + 0.5
    x_mm, y_mm = _unturned(u, v)
    x_mm, y_mm = x_mm - LEFT_MM, y_mm - TOP_MM
    inside = (x_mm > -0.2) & (x_mm < 270.2) & (y_mm > -0.2) & (y_mm < 180.2)
    grid = np.maximum(
        np.maximum(_coverage(x_mm, 1.0, 2.4, 270), _coverage(x_mm, 10.0, 6.0, 27)),
        np.maximum(_coverage(y_mm, 1.0, 2.4, 180), _coverage(y_mm, 10.0, 6.0, 18)),
    )
    grid *= inside
    pen_mm = 90.0 + 50.0 * np.sin(x_mm / 30.0)
    pen = np.clip(4.0 - np.abs(y_mm - pen_mm) * PX_PER_MM * 0.9, 0.0, 1.0) * inside
    colour = PAPER + grid[..., None] * (GRID - PAPER)
    colour = colour + pen[..., None] * (PEN - colour)
    stain = np.clip(1.3 - np.hypot(u - 2500.0, v - 3000.0) / 900.0, 0.0, 1.0)[..., None] * 0.35
    colour = colour * (1.0 - stain + stain * np.array([0.75, 0.55, 0.3]))
    colour += np.random.default_rng(first).normal(0.0, 3.0, colour.shape)
    return np.clip(np.rint(colour), 0, 255).astype(np.uint8)


def make_sheet() -> NDArray[np.uint8]:
    return np.concatenate([_rows(first, min(first + 250, HEIGHT)) for first in range(0, HEIGHT, 250)])


def truth_pixels(values: NDArray[np.float64]) -> NDArray[np.float64]:
    """True sheet pixels of chart values (hours, y units)."""
    x_mm = LEFT_MM + values[:, 0] * 10.0
    y_mm = TOP_MM + 180.0 - values[:, 1]
    theta = math.radians(ANGLE_DEG)
    du, dv = x_mm * PX_PER_MM - WIDTH / 2.0, y_mm * PX_PER_MM - HEIGHT / 2.0
    u = math.cos(theta) * du - math.sin(theta) * dv + WIDTH / 2.0
    v = math.sin(theta) * du + math.cos(theta) * dv + HEIGHT / 2.0
    return np.column_stack([u, v])


def _accuracy(detection: GridDetection) -> tuple[float, float, int]:
    pixels = np.array([p["pixel"] for p in detection.control_points])
    values = np.array([p["value"] for p in detection.control_points])
    error = np.hypot(*(pixels - truth_pixels(values)).T)
    return float(np.sqrt(np.mean(error**2))), float(error.max()), len(error)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--runs", type=int, default=5)
    parser.add_argument("--skip-reference", action="store_true")
    args = parser.parse_args()
    spec = grid_spec_from_dict(SPEC)
    assert isinstance(spec, CartesianGridSpec)
    sheet = make_sheet()
    times, cpu_times = [], []
    detection = None
    for _ in range(args.runs):
        start, cpu_start = time.perf_counter(), time.process_time()
        detection = detect_cartesian_grid(sheet, spec)
        times.append(time.perf_counter() - start)
        cpu_times.append(time.process_time() - cpu_start)
    assert detection is not None
    median = statistics.median(times)
    rms, worst, count = _accuracy(detection)
    print(f"sheet {WIDTH} x {HEIGHT} px, grid turned {ANGLE_DEG} deg, {args.runs} runs")
    print(f"{'step':44s} {'seconds':>9s} {'ratio':>7s}")
    print(f"{'detect_cartesian_grid (median wall time)':44s} {median:9.3f} {1.0:7.2f}")
    print(f"{'detect_cartesian_grid (median CPU time)':44s} {statistics.median(cpu_times):9.3f} {'':>7s}")
    if not args.skip_reference:
        start = time.perf_counter()
        srgb_to_lab(sheet)
        reference = time.perf_counter() - start
        print(f"{'reference: srgb_to_lab of the whole sheet':44s} {reference:9.3f} {reference / median:7.2f}")
    print(
        f"control points: {count}, RMS {rms:.3f} px, max {worst:.3f} px; confidence {detection.confidence:.3f}; "
        f"rotation {detection.rotation_deg:.3f} deg; transform {detection.residual_report.transform}, "
        f"residual RMS {detection.residual_report.rms_px:.3f} px"
    )


if __name__ == "__main__":
    main()
