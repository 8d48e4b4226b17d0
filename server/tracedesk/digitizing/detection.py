"""Automatic registration of a sheet from its printed grid (issue 9): propose, and store only when accepted."""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.circle_detection import detect_circular_chart
from tracedesk.science.circular_registration import register_circular_chart
from tracedesk.science.grid_registration import detect_cartesian_grid
from tracedesk.science.grid_spec import CartesianGridSpec, CircularChartSpec, grid_spec_from_dict

TIME_ZERO_FIELDS = ("time_line_hours", "time_zero_angle_deg", "time_direction")


def missing_time_zero_fields(spec: CircularChartSpec) -> list[str]:
    """The spec fields a circular chart needs before time zero can be found without a click."""
    return [name for name in TIME_ZERO_FIELDS if getattr(spec, name) is None]


def detect_calibration(image: NDArray[np.uint8], spec: dict[str, Any]) -> dict[str, Any]:
    """The detection as JSON: control points, a ready calibration, confidence, orientation, warnings.

    Circular charts whose spec gives the time lines, the time-zero reference angle and the time direction
    are registered completely (rings and time zero); without those only the centre and the rings are
    found, and time zero has to be placed by hand (no ``calibration`` then).
    """
    grid_spec = grid_spec_from_dict(spec)
    if isinstance(grid_spec, CartesianGridSpec):
        return {"kind": "cartesian", **detect_cartesian_grid(image, grid_spec).to_dict()}
    missing = missing_time_zero_fields(grid_spec)
    if not missing:
        return {"kind": "circular", **register_circular_chart(image, grid_spec).to_dict()}
    detection = detect_circular_chart(image, grid_spec).to_dict()
    note = f"time zero has to be placed by hand: the chart spec does not give {', '.join(missing)}"
    return {"kind": "circular", **detection, "warnings": [*detection["warnings"], note]}
