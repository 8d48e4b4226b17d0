"""Automatic registration of a sheet from its printed grid (issue 9): propose, and store only when accepted."""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.circle_detection import detect_circular_chart
from tracedesk.science.grid_registration import detect_cartesian_grid
from tracedesk.science.grid_spec import CartesianGridSpec, grid_spec_from_dict


def detect_calibration(image: NDArray[np.uint8], spec: dict[str, Any]) -> dict[str, Any]:
    """The detection as JSON: control points, a ready calibration (cartesian), confidence, orientation, warnings.

    Circular charts give their centre and ring radii (the value law); time zero still has to be placed by hand.
    """
    grid_spec = grid_spec_from_dict(spec)
    if isinstance(grid_spec, CartesianGridSpec):
        return {"kind": "cartesian", **detect_cartesian_grid(image, grid_spec).to_dict()}
    detection = detect_circular_chart(image, grid_spec)
    return {"kind": "circular", **detection.to_dict(), "value_axis": detection.value_axis()}
