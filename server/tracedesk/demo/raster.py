"""Anti-aliased line drawing in numpy, exact to a fraction of a pixel, for the demo's rendered charts.

Strokes are polylines in sheet pixels (origin at the top-left corner of the top-left pixel, u right, v down;
pixel (i, j) has its centre at (i + 0.5, j + 0.5)). A pixel's coverage is ``clip(w/2 + 1/2 - d, 0, 1)``, d being
the distance from its centre to the polyline and w the line width: across a straight line the coverage is
symmetric about the true centre line, so a column centroid of the ink recovers the line to well under a pixel.
That is what makes the demo's known truth honest.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray

FloatArray = NDArray[np.float64]
Coverage = NDArray[np.float32]

# Polylines are split into pieces no longer than this (px) so each piece touches a small pixel window.
MAX_PIECE_PX = 2.0
# Pieces evaluated per numpy batch (bounds the temporary arrays to a few tens of MB).
PIECES_PER_BATCH = 4_000


def densify_polyline(points: ArrayLike, *, max_step_px: float = MAX_PIECE_PX) -> FloatArray:
    """Insert points so that no segment of the polyline is longer than ``max_step_px`` (px)."""
    uv = np.asarray(points, dtype=np.float64).reshape(-1, 2)
    if len(uv) < 2:
        return uv
    lengths = np.hypot(*np.diff(uv, axis=0).T)
    pieces = np.maximum(1, np.ceil(lengths / max_step_px)).astype(np.intp)
    starts = np.repeat(uv[:-1], pieces, axis=0)
    ends = np.repeat(uv[1:], pieces, axis=0)
    fraction = (np.arange(pieces.sum()) - np.repeat(np.cumsum(pieces) - pieces, pieces)) / np.repeat(pieces, pieces)
    dense = starts + (ends - starts) * fraction[:, None]
    return np.vstack([dense, uv[-1:]])


def _segment_distances(a: FloatArray, b: FloatArray, centres: FloatArray) -> FloatArray:
    """Distance (px) from pixel centres (n, k, 2) to the segments a -> b (n, 2)."""
    direction = b - a
    length_sq = np.maximum(np.sum(direction**2, axis=1), 1e-12)
    offset = centres - a[:, None, :]
    along = np.clip(np.einsum("nkd,nd->nk", offset, direction) / length_sq[:, None], 0.0, 1.0)
    nearest = a[:, None, :] + along[..., None] * direction[:, None, :]
    return np.asarray(np.hypot(*(centres - nearest).transpose(2, 0, 1)), dtype=np.float64)


def stroke_polyline(canvas: Coverage, points: ArrayLike, *, width_px: float) -> None:
    """Draw a polyline of width ``width_px`` (px) into ``canvas`` (H, W coverage in [0, 1]), keeping the maximum.

    Points that are NaN split the polyline (no segment is drawn to or from them).
    """
    stroke_polylines(canvas, [points], width_px=width_px)


def stroke_polylines(canvas: Coverage, lines: Sequence[ArrayLike], *, width_px: float) -> None:
    """Draw several polylines of one width at once (one pass over all their segments)."""
    starts, ends = [], []
    for line in lines:
        for piece in _finite_runs(np.asarray(line, dtype=np.float64).reshape(-1, 2)):
            dense = densify_polyline(piece)
            if len(dense) == 1:
                dense = np.vstack([dense, dense])
            starts.append(dense[:-1])
            ends.append(dense[1:])
    if not starts:
        return
    a, b = np.vstack(starts), np.vstack(ends)
    for first in range(0, len(a), PIECES_PER_BATCH):
        _stroke_segments(canvas, a[first : first + PIECES_PER_BATCH], b[first : first + PIECES_PER_BATCH], width_px)


def _finite_runs(uv: FloatArray) -> list[FloatArray]:
    finite = np.isfinite(uv).all(axis=1)
    runs: list[FloatArray] = []
    start = None
    for index, ok in enumerate(np.append(finite, False)):
        if ok and start is None:
            start = index
        elif not ok and start is not None:
            runs.append(uv[start:index])
            start = None
    return runs


def _stroke_segments(canvas: Coverage, a: FloatArray, b: FloatArray, width_px: float) -> None:
    reach = width_px / 2.0 + 0.5
    span = math.ceil(MAX_PIECE_PX + 2.0 * reach) + 2
    corner = np.floor(np.minimum(a, b) - reach - 0.5).astype(np.intp)
    offsets = np.stack(np.meshgrid(np.arange(span), np.arange(span), indexing="xy"), axis=-1).reshape(-1, 2)
    pixels = corner[:, None, :] + offsets[None, :, :]
    distance = _segment_distances(a, b, pixels.astype(np.float64) + 0.5)
    coverage = np.clip(reach - distance, 0.0, 1.0).astype(np.float32)
    height, width = canvas.shape
    inside = (coverage > 0) & (pixels[..., 0] >= 0) & (pixels[..., 0] < width)
    inside &= (pixels[..., 1] >= 0) & (pixels[..., 1] < height)
    np.maximum.at(canvas, (pixels[..., 1][inside], pixels[..., 0][inside]), coverage[inside])


def fill_disc(canvas: Coverage, *, centre_uv: tuple[float, float], radius_px: float, value: float = 1.0) -> None:
    """Anti-aliased filled disc (coverage times ``value``), keeping the maximum."""
    height, width = canvas.shape
    u0, v0 = (max(0, math.floor(c - radius_px - 1)) for c in centre_uv)
    u1 = min(width, math.ceil(centre_uv[0] + radius_px + 1))
    v1 = min(height, math.ceil(centre_uv[1] + radius_px + 1))
    if u1 <= u0 or v1 <= v0:
        return
    vv, uu = np.mgrid[v0:v1, u0:u1]
    distance = np.hypot(uu + 0.5 - centre_uv[0], vv + 0.5 - centre_uv[1])
    cover = (np.clip(radius_px + 0.5 - distance, 0.0, 1.0) * value).astype(np.float32)
    np.maximum(canvas[v0:v1, u0:u1], cover, out=canvas[v0:v1, u0:u1])


def new_canvas(height: int, width: int) -> Coverage:
    """An empty coverage layer of the sheet's size."""
    return np.zeros((height, width), dtype=np.float32)
