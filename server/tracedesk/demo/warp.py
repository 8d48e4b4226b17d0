"""How a sheet sits on the scanner: a slight rotation, offset and (uneven) paper shrinkage.

Geometry is drawn in the *paper* frame (pixels of a perfect, flat chart) and mapped to the *scan* frame by
``scan = offset + M @ (paper - pivot) + pivot + bow``, where M is a rotation times an axis-wise shrinkage and
``bow`` a small quadratic stretch along u (paper that shrank more towards one edge). Circular charts use a
pure similarity (no bow, equal shrinkage) so their rings stay circles and the calibration is exact.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import ndimage

FloatArray = NDArray[np.float64]
# Fixed-point steps of the inverse map: the bow is a ~1e-3 perturbation, so each step gains ~3 digits.
INVERSE_ITERATIONS = 6
# Scan rows resampled per batch (bounds the temporary coordinate arrays).
RESAMPLE_ROWS = 256


@dataclass(frozen=True)
class SheetWarp:
    """Paper frame -> scan frame.

    Attributes
    ----------
    rotation_deg : float
        Turn of the sheet on the scanner, degrees clockwise on the screen.
    shrink_u, shrink_v : float
        Scale factors along the paper's u and v (e.g. 0.996: the paper shrank by 0.4 %).
    offset_px : (float, float)
        Shift of the sheet on the scanner (px).
    pivot_px : (float, float)
        Point the rotation and shrinkage are about (px, paper frame).
    bow : float
        Quadratic stretch along u: ``bow * (u - pivot_u)^2 / span_px`` px is added to u (0 for none).
    span_px : float
        Length that normalises the bow (px), usually the sheet width.
    """

    rotation_deg: float = 0.0
    shrink_u: float = 1.0
    shrink_v: float = 1.0
    offset_px: tuple[float, float] = (0.0, 0.0)
    pivot_px: tuple[float, float] = (0.0, 0.0)
    bow: float = 0.0
    span_px: float = 1.0

    @property
    def matrix(self) -> FloatArray:
        """The linear part M (rotation after shrinkage), acting on (u, v) column vectors."""
        angle = math.radians(self.rotation_deg)
        turn = np.array([[math.cos(angle), -math.sin(angle)], [math.sin(angle), math.cos(angle)]])
        return turn @ np.diag([self.shrink_u, self.shrink_v])

    @property
    def mean_scale(self) -> float:
        """Geometric mean of the two shrink factors (scan px per paper px)."""
        return math.sqrt(self.shrink_u * self.shrink_v)

    def _bowed(self, paper: FloatArray) -> FloatArray:
        bent = paper.copy()
        bent[:, 0] += self.bow * (paper[:, 0] - self.pivot_px[0]) ** 2 / self.span_px
        return bent

    def paper_to_scan(self, points: ArrayLike) -> FloatArray:
        """Scan pixels (px) of paper pixels (px), shape (n, 2)."""
        paper = np.asarray(points, dtype=np.float64).reshape(-1, 2)
        (a, b), (c, d) = self.matrix
        u = paper[:, 0] - self.pivot_px[0]
        v = paper[:, 1] - self.pivot_px[1]
        u = u + self.bow * u * u / self.span_px
        return np.column_stack(
            [a * u + b * v + self.pivot_px[0] + self.offset_px[0], c * u + d * v + self.pivot_px[1] + self.offset_px[1]]
        )

    def scan_to_paper(self, points: ArrayLike) -> FloatArray:
        """Paper pixels (px) of scan pixels (px), shape (n, 2): the exact inverse, by fixed-point steps."""
        scan = np.asarray(points, dtype=np.float64).reshape(-1, 2)
        (a, b), (c, d) = np.linalg.inv(self.matrix)
        du = scan[:, 0] - self.pivot_px[0] - self.offset_px[0]
        dv = scan[:, 1] - self.pivot_px[1] - self.offset_px[1]
        bent = a * du + b * dv
        u = bent.copy()
        for _ in range(INVERSE_ITERATIONS if self.bow else 0):
            u = bent - self.bow * u * u / self.span_px
        return np.column_stack([u + self.pivot_px[0], c * du + d * dv + self.pivot_px[1]])

    def resample_layer(self, layer: NDArray[np.float32], shape: tuple[int, int]) -> NDArray[np.float32]:
        """A paper-frame layer (H, W) seen in the scan frame of ``shape`` (bilinear; 0 outside the paper)."""
        if not self.bow:
            return self._resample_affine(layer, shape)
        rows, cols = shape
        out = np.zeros(shape, dtype=np.float32)
        u = np.arange(cols, dtype=np.float64) + 0.5
        for first in range(0, rows, RESAMPLE_ROWS):
            v = np.arange(first, min(rows, first + RESAMPLE_ROWS), dtype=np.float64) + 0.5
            scan = np.column_stack([np.tile(u, len(v)), np.repeat(v, cols)])
            paper = self.scan_to_paper(scan) - 0.5  # pixel centres -> array indices
            sampled = ndimage.map_coordinates(layer, [paper[:, 1], paper[:, 0]], order=1, mode="constant", cval=0.0)
            out[first : first + len(v)] = sampled.reshape(len(v), cols)
        return out

    def _resample_affine(self, layer: NDArray[np.float32], shape: tuple[int, int]) -> NDArray[np.float32]:
        """Without a bow the inverse is affine: one call in (row, column) index space."""
        (a, b), (c, d) = np.linalg.inv(self.matrix)
        index_matrix = np.array([[d, c], [b, a]])  # (row, col) order: v first
        shift = 0.5 - np.array([self.pivot_px[1] + self.offset_px[1], self.pivot_px[0] + self.offset_px[0]])
        offset = index_matrix @ shift + np.array([self.pivot_px[1], self.pivot_px[0]]) - 0.5
        return np.asarray(
            ndimage.affine_transform(layer, index_matrix, offset=offset, output_shape=shape, order=1, cval=0.0),
            dtype=np.float32,
        )
