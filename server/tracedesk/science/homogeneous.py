"""3x3 homogeneous matrices acting on image pixels and chart coordinates (points of shape (n, 2)).

Shared by the matrix transforms of :mod:`tracedesk.science.registration` and the normalisations of
:mod:`tracedesk.science.quadratic_transform`. Coordinates keep their units (px or chart units).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]


def apply_homogeneous_matrix(matrix: FloatArray, points: FloatArray) -> FloatArray:
    """Apply a 3x3 homogeneous matrix to points (n, 2); no division when the bottom row is (0, 0, 1).

    Written with element-wise operations: numpy's (n, 2) @ (2, 2) product is several times slower and
    its timing erratic.
    """
    u, v = points[:, 0], points[:, 1]
    result = np.empty((points.shape[0], 2))
    for row in (0, 1):
        column = result[:, row]
        np.multiply(u, matrix[row, 0], out=column)
        column += v * matrix[row, 1]
        column += matrix[row, 2]
    if matrix[2, 0] == 0.0 and matrix[2, 1] == 0.0 and matrix[2, 2] == 1.0:
        return result
    with np.errstate(divide="ignore", invalid="ignore"):
        weight = u * matrix[2, 0]
        weight += v * matrix[2, 1]
        weight += matrix[2, 2]
        result /= weight[:, None]
    return result


def invert_homogeneous_matrix(matrix: FloatArray) -> FloatArray:
    """Inverse of a homogeneous matrix; exact zeros kept in the bottom row of affine matrices."""
    if matrix[2, 0] == 0.0 and matrix[2, 1] == 0.0 and matrix[2, 2] == 1.0:
        inverse = np.eye(3)
        inverse[:2, :2] = np.linalg.inv(matrix[:2, :2])
        inverse[:2, 2] = -inverse[:2, :2] @ matrix[:2, 2]
        return inverse
    general = np.asarray(np.linalg.inv(matrix), dtype=np.float64)
    return general / general[2, 2] if general[2, 2] != 0.0 else general
