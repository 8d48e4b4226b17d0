"""Automatic pen tracing on a full A4 sheet at 600 dpi (7000 x 5000 px, RGB).

Prints a small table: median time of ``trace_pen`` over a whole sheet; a straightforward reference in
the same run (float64 CIELAB of every pixel, CIEDE2000 of every pixel, then a per-pixel dynamic
programme over columns with a +-3 row jump window, written the obvious way with numpy); one plain
memory pass over the image (the physical floor for any per-pixel colour test); peak memory of
``trace_pen`` (tracemalloc) as a multiple of the image's bytes; accuracy against the rendered truth.

Target (task brief): <= 0.5 s median on a 2-core machine, peak memory <= 3x the image.

Run: .venv/bin/python bench/bench_tracing.py [--skip-reference]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
import tracemalloc
from collections.abc import Callable
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tests.science.chart_render import (
    CircleGrid,
    GridLines,
    LinearChartMapping,
    PenStroke,
    distance_to_polyline,
    jpeg_roundtrip,
    render_sheet,
)

from tracedesk.science.colour import colour_to_lab, delta_e_ciede2000, srgb_to_lab
from tracedesk.science.trace_regions import AnnulusRegion, BoxRegion
from tracedesk.science.tracing import TraceResult, trace_pen

WIDTH, HEIGHT = 7000, 5000
BLUE, RED = "#1f3cc8", "#c81e3c"
TOLERANCE = 20.0
RUNS = 7


def make_sheet() -> tuple[np.ndarray, PenStroke]:
    """Grid, two 7 px pens (0.3 mm at 600 dpi) crossing each other, JPEG quality 85 like a scanner."""
    mapping = LinearChartMapping(x_range=(0, 10), y_range=(-1.5, 1.5), box_px=(300, 200, 6700, 4800))
    blue = PenStroke.from_function(
        lambda x: np.sin(x) + 0.3 * np.cos(3.1 * x),
        mapping=mapping,
        x_range=(0, 10),
        colour=BLUE,
        width_px=7.0,
        samples=40000,
    )
    red = PenStroke.from_function(
        lambda x: 0.8 - 0.2 * x + 0.1 * np.sin(2 * x),
        mapping=mapping,
        x_range=(0, 10),
        colour=RED,
        width_px=7.0,
        samples=40000,
    )
    grid = GridLines(u_positions=np.arange(300, 6701, 64.0), v_positions=np.arange(200, 4801, 46.0), width_px=3.0)
    sheet = render_sheet(width_px=WIDTH, height_px=HEIGHT, strokes=[blue, red], grid=grid)
    return jpeg_roundtrip(sheet, quality=85), blue


def time_ours(sheet: np.ndarray) -> tuple[float, TraceResult]:
    times: list[float] = []
    for _ in range(RUNS):
        start = time.perf_counter()
        result = trace_pen(sheet, pen_colour=BLUE, region=BoxRegion(0, 0, WIDTH, HEIGHT), tolerance=TOLERANCE)
        times.append(time.perf_counter() - start)
    return statistics.median(times), result


def time_circular() -> tuple[float, float]:
    """A 10-inch circular chart at 600 dpi (6000 x 6000 px): median time and RMS error (px)."""
    centre = (3000.0, 3000.0)

    def radius(angle: np.ndarray) -> np.ndarray:
        return 1700 + 600 * np.sin(np.radians(2 * angle)) + 250 * np.cos(np.radians(5 * angle))

    pen = PenStroke.from_polar(
        radius, centre_uv=centre, angle_range_deg=(10, 330), colour=RED, width_px=7.0, samples=60000
    )
    grid = CircleGrid(
        centre_uv=centre,
        radii_px=np.arange(600, 2901, 150.0),
        angles_deg=np.arange(0, 360, 7.5),
        radius_range_px=(600, 2900),
        width_px=3.0,
    )
    sheet = jpeg_roundtrip(render_sheet(width_px=6000, height_px=6000, strokes=[pen], grid=grid), quality=85)
    region = AnnulusRegion(centre, 600.0, 2900.0)
    times = []
    for _ in range(RUNS):
        start = time.perf_counter()
        result = trace_pen(sheet, pen_colour=RED, region=region, tolerance=TOLERANCE)
        times.append(time.perf_counter() - start)
    angle = np.degrees(np.arctan2(result.vertices[:, 1] - centre[1], result.vertices[:, 0] - centre[0])) % 360
    inner = (angle > 10.5) & (angle < 329.5)
    distance = distance_to_polyline(result.vertices[inner], pen.points_uv)
    return statistics.median(times), float(np.sqrt(np.mean(distance**2)))


def peak_memory_ours(sheet: np.ndarray) -> int:
    tracemalloc.start()
    trace_pen(sheet, pen_colour=BLUE, region=BoxRegion(0, 0, WIDTH, HEIGHT), tolerance=TOLERANCE)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak


def reference_trace(sheet: np.ndarray, *, jump: int = 3, continuity_weight: float = 0.5) -> np.ndarray:
    """The obvious implementation: whole-sheet float64 CIELAB and CIEDE2000, then a dense DP."""
    difference = delta_e_ciede2000(srgb_to_lab(sheet), colour_to_lab(BLUE))
    score = np.clip(1.0 - difference / TOLERANCE, 0.0, 1.0)
    del difference
    height, width = score.shape
    came_from = np.zeros((width, height), dtype=np.int8)
    total = score[:, 0].copy()
    for column in range(1, width):
        best = np.full(height, -np.inf)
        for shift in range(-jump, jump + 1):
            shifted = np.full(height, -np.inf)
            if shift >= 0:
                shifted[shift:] = total[: height - shift]
            else:
                shifted[:shift] = total[-shift:]
            candidate = shifted - continuity_weight * abs(shift)
            better = candidate > best
            best[better] = candidate[better]
            came_from[column][better] = shift
        total = best + score[:, column]
    rows = np.empty(width, dtype=np.intp)
    rows[-1] = int(np.argmax(total))
    for column in range(width - 1, 0, -1):
        rows[column - 1] = rows[column] - came_from[column, rows[column]]
    return rows


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--skip-reference", action="store_true", help="skip the slow reference (about 45 s, 9 GB)")
    args = parser.parse_args()
    sheet, truth = make_sheet()
    image_bytes = sheet.nbytes
    floor = statistics.median(_timed(lambda: sheet.sum(dtype=np.uint64)) for _ in range(5))
    copy = statistics.median(_timed(sheet.copy) for _ in range(5))
    ours, result = time_ours(sheet)
    peak = peak_memory_ours(sheet)
    distance = distance_to_polyline(result.vertices, truth.points_uv)
    inner = (result.vertices[:, 0] > 310) & (result.vertices[:, 0] < 6690)
    print(f"sheet {WIDTH} x {HEIGHT} RGB ({image_bytes / 1e6:.0f} MB), one pen, whole sheet, {RUNS} runs")
    print(f"{'what':44s} {'time':>10s} {'ratio':>8s}")
    print(f"{'ours: trace_pen (median)':44s} {ours:9.3f}s {1.0:8.2f}")
    if not args.skip_reference:
        reference = _timed(lambda: reference_trace(sheet))
        print(f"{'reference: float64 Lab + dense DP (1 run)':44s} {reference:9.3f}s {reference / ours:8.1f}x slower")
    print(f"{'floor: image.sum(dtype=uint64)':44s} {floor:9.3f}s {ours / floor:8.1f}x ours/floor")
    print(f"{'floor: image.copy()':44s} {copy:9.3f}s {ours / copy:8.1f}x ours/floor")
    print(f"peak memory of trace_pen (tracemalloc): {peak / 1e6:.0f} MB = {peak / image_bytes:.2f}x the image")
    print(
        f"accuracy vs truth (JPEG 85, 7 px pen, crossings included): RMS {np.sqrt(np.mean(distance[inner] ** 2)):.3f}"
        f" px, 99th percentile {np.percentile(distance[inner], 99):.3f} px, max {distance[inner].max():.2f} px,"
        f" coverage {result.coverage:.3f}"
    )
    circular_time, circular_rms = time_circular()
    print(f"circular chart 6000 x 6000 (annulus 600-2900 px, JPEG 85): median {circular_time:.3f}s,", end=" ")
    print(f"RMS {circular_rms:.3f} px")


def _timed(function: Callable[[], object]) -> float:
    start = time.perf_counter()
    function()
    return time.perf_counter() - start


if __name__ == "__main__":
    main()
