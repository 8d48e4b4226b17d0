"""Calibration speed on 1,000,000 points per calibration kind: forward, inverse and round trip.

Run: ``.venv/bin/python -m bench.bench_calibration``. Prints, per kind, the best of five runs of the forward
mapping (pixels -> values), of the inverse (values -> pixels) with its ratio to that forward run (same
process, same points), and of the round trip, plus the largest round-trip error. A plain numpy matrix
multiply of the same points (``points @ M.T``, M 2x2) is timed first as a floor.
Targets (issue 3): round trip <= 0.2 s per 1,000,000 points for every kind, the polynomial2 inverse
included, with round-trip errors below 1e-9 px.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from typing import Any

import numpy as np

from tracedesk.science.calibration import ChartMapping, build_calibration

N_POINTS = 1_000_000
REPEATS = 5


def _best_seconds(work: Callable[[], object]) -> float:
    best = math.inf
    for _ in range(REPEATS):
        start = time.perf_counter()
        work()
        best = min(best, time.perf_counter() - start)
    return best


def _control_points(transform: str, *, bend_px: float = 0.0) -> dict[str, Any]:
    rng = np.random.default_rng(5)
    pixels = np.column_stack([rng.uniform(100, 2900, 16), rng.uniform(100, 1900, 16)])
    values = np.column_stack([0.01 * pixels[:, 0] + 2e-6 * pixels[:, 1] ** 2, 80.0 - 0.04 * pixels[:, 1]])
    if transform == "projective":
        w = 1.0 + 5e-5 * pixels[:, 0] - 3e-5 * pixels[:, 1]
        values = np.column_stack([0.01 * pixels[:, 0] / w, (80.0 - 0.04 * pixels[:, 1]) / w])
    if bend_px:
        # Paper bowed by about bend_px at the corners in both directions, so Newton has real work to do.
        u, v = pixels[:, 0], pixels[:, 1]
        values = np.column_stack(
            [0.01 * (u + bend_px * (v / 2000.0) ** 2), 80.0 - 0.04 * (v - bend_px * (u / 3000.0) ** 2)]
        )
    return {
        "kind": "cartesian",
        "x_axis": {"scale": "time"},
        "y_axis": {"scale": "linear"},
        "control_points": [{"pixel": p.tolist(), "value": v.tolist()} for p, v in zip(pixels, values, strict=True)],
        "transform": transform,
    }


def _specs() -> dict[str, dict[str, Any]]:
    specs = {name: _control_points(name) for name in ("similarity", "affine", "projective", "polynomial2")}
    specs["polynomial2 (30 px bow)"] = _control_points("polynomial2", bend_px=30.0)
    specs["circular (pen arc)"] = {
        "kind": "circular",
        "centre": [1500.5, 1500.5],
        "value_axis": {"scale": "linear", "min": 0.0, "max": 100.0, "radius_min_px": 250.0, "radius_max_px": 1450.0},
        "period_hours": 24.0,
        "time_zero_pixel": [1500.5 + 1450.0 * math.cos(-1.4), 1500.5 + 1450.0 * math.sin(-1.4)],
        "time_direction": "clockwise",
        "pen_arc": {"pivot_pixel": [1500.5 + 500.0, 1500.5 - 1320.0], "length_px": 1400.0},
    }
    specs["circular (radial)"] = {**specs["circular (pen arc)"], "pen_arc": None}
    grid = [(t, y) for t in (0.0, 12.0, 24.0) for y in (0.0, 50.0, 100.0)]
    specs["curvilinear (affine)"] = {
        "kind": "curvilinear",
        "x_axis": {"scale": "time"},
        "y_axis": {"scale": "linear"},
        "control_points": [
            {
                "pixel": [
                    200.0 + 100.0 * t + 1500.0 - math.sqrt(1500.0**2 - (600.0 - 10.0 * y) ** 2),
                    1100.0 - 10.0 * y,
                ],
                "value": [t, y],
            }
            for t, y in grid
        ],
        "transform": "affine",
        "pen_arc": {"pivot_pixel": [0.0, 600.0], "length_px": 1500.0, "pivot_side": "later"},
    }
    return specs


def _sample_pixels(name: str, rng: np.random.Generator) -> np.ndarray[Any, np.dtype[np.float64]]:
    if name.startswith("circular"):
        radius, angle = rng.uniform(260, 1440, N_POINTS), rng.uniform(-math.pi, math.pi, N_POINTS)
        return np.column_stack([1500.5 + radius * np.cos(angle), 1500.5 + radius * np.sin(angle)])
    return np.column_stack([rng.uniform(150, 2850, N_POINTS), rng.uniform(150, 1850, N_POINTS)])


def main() -> None:
    rng = np.random.default_rng(1)
    reference_points = _sample_pixels("affine", rng)
    matrix = np.array([[0.01, 0.002], [0.001, -0.04]])
    reference = _best_seconds(lambda: reference_points @ matrix.T)
    print(f"{N_POINTS:,} points, best of {REPEATS}; reference numpy (n,2) @ (2,2): {reference * 1e3:.1f} ms\n")
    header = ("kind", "forward", "inverse", "inv/fwd", "round trip", "max error px")
    print(f"{header[0]:<24} {header[1]:>9} {header[2]:>9} {header[3]:>8} {header[4]:>11} {header[5]:>13}")
    for name, spec in _specs().items():
        mapping: ChartMapping = build_calibration(spec)
        pixels = _sample_pixels(name, rng)
        values = mapping.pixels_to_values(pixels)
        forward = _best_seconds(lambda mapping=mapping, pixels=pixels: mapping.pixels_to_values(pixels))
        inverse = _best_seconds(lambda mapping=mapping, values=values: mapping.values_to_pixels(values))

        def round_trip(mapping: ChartMapping = mapping, pixels: Any = pixels) -> Any:
            return mapping.values_to_pixels(mapping.pixels_to_values(pixels))

        seconds = _best_seconds(round_trip)
        error = float(np.nanmax(np.abs(round_trip() - pixels)))
        print(
            f"{name:<24} {forward * 1e3:>6.1f} ms {inverse * 1e3:>6.1f} ms {inverse / forward:>7.1f}x"
            f" {seconds * 1e3:>8.1f} ms {error:>13.1e}"
        )


if __name__ == "__main__":
    main()
