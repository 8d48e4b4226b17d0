"""Chart values -> sheet pixels for drawing, where values a scale cannot show (a band below zero on a log axis)
become gaps instead of errors."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.calibration import ChartMapping
from tracedesk.science.errors import ScienceInputError

FloatArray = NDArray[np.float64]


def axis_scales(spec: Mapping[str, Any]) -> tuple[str, str]:
    """Scale names (x, y) of a calibration spec; x of circular and strip-speed charts is time."""
    if spec.get("kind") == "circular":
        axis = spec.get("value_axis") or {}
        return "time", str(axis.get("scale", "linear"))
    x_axis, y_axis = spec.get("x_axis") or {}, spec.get("y_axis") or {}
    x_scale = "time" if spec.get("kind") == "strip_speed" else str(x_axis.get("scale", "linear"))
    return x_scale, str(y_axis.get("scale", "linear"))


def _showable(values: FloatArray, scale: str) -> FloatArray:
    shown = np.array(values, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        if scale == "log10":
            shown[~(shown > 0)] = np.nan
        elif scale == "sqrt":
            shown[~(shown >= 0)] = np.nan
    return shown


def to_pixels(mapping: ChartMapping, x: FloatArray, y: FloatArray, scales: tuple[str, str]) -> FloatArray:
    """Pixels (n, 2) of the values (x, y); NaN rows where a value cannot be shown on its axis."""
    values = np.column_stack([_showable(np.asarray(x), scales[0]), _showable(np.asarray(y), scales[1])])
    try:
        with np.errstate(all="ignore"):
            return mapping.values_to_pixels(values)
    except ScienceInputError:
        return np.full(values.shape, np.nan)
