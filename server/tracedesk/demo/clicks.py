"""What a technician would click, made from the known truth: control points, pen colour, manual vertices.

Clicks land a little off the exact spot (a few tenths of a pixel, seeded per sheet), as real ones do, so the
calibration reports honest non-zero residuals and a manual trace is not a perfect copy of the pen.
"""

from __future__ import annotations

import copy
import zlib
from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracedesk.demo.truth import PenTruth, SheetTruth, pen_pixels_at

FloatArray = NDArray[np.float64]
CLICK_SPREAD_PX = 0.35
VERTEX_SPREAD_PX = 0.5


def rng_for(key: str) -> np.random.Generator:
    """A generator seeded by a text key (stable across runs and machines)."""
    return np.random.default_rng(zlib.crc32(key.encode("utf-8")))


def _nudged(pixel: list[float], rng: np.random.Generator, spread: float) -> list[float]:
    return [round(float(c + rng.normal(0.0, spread)), 3) for c in pixel]


def clicked_calibration(truth: SheetTruth, *, key: str) -> dict[str, Any]:
    """The truth's calibration with every clicked point (control or check point) nudged off its exact pixel."""
    rng = rng_for(f"calibration:{key}")
    spec = copy.deepcopy(truth.calibration)
    for name in ("control_points", "check_points"):
        for point in spec.get(name, []):
            point["pixel"] = _nudged(point["pixel"], rng, CLICK_SPREAD_PX)
    return spec


def sampled_pen_colour(image: NDArray[np.uint8], pen: PenTruth) -> str:
    """The pen's colour as seen on the scan (``#rrggbb``): the median of the pixels under its centre line."""
    height, width = image.shape[:2]
    columns = np.clip(np.floor(pen.pixels[:, 0]).astype(np.intp), 0, width - 1)
    rows = np.clip(np.floor(pen.pixels[:, 1]).astype(np.intp), 0, height - 1)
    rgb = np.median(image[rows, columns].astype(np.float64), axis=0)
    return "#" + "".join(f"{round(value):02x}" for value in rgb)


def manual_vertices(
    pen: PenTruth, *, key: str, step: float, skip: tuple[float, float] | None = None
) -> list[list[float]]:
    """Vertices clicked along the pen every ``step`` (x units), leaving out the span ``skip`` if given."""
    rng = rng_for(f"vertices:{key}:{pen.name}")
    x = np.arange(pen.x[0], pen.x[-1], step)
    x = np.append(x, pen.x[-1])
    if skip is not None:
        x = x[(x < skip[0]) | (x > skip[1])]
    pixels = pen_pixels_at(pen, x) + rng.normal(0.0, VERTEX_SPREAD_PX, size=(len(x), 2))
    return [[round(float(u), 2), round(float(v), 2)] for u, v in pixels]
