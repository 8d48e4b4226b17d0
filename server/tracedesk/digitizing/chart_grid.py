"""Grid lines of a calibration drawn back onto the sheet, so a person can see at a glance that it fits the print.

Lines are placed at round values of each axis (1-2-5 steps, decades on log10 axes, whole hours on time axes) over
the range the control points span, then mapped through the calibration's ``values_to_pixels``. Circular charts
get rings at round values and time lines at round hours (arcs when the pen swings on an arm).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.calibration import ChartMapping

FloatArray = NDArray[np.float64]
HOUR_STEPS = (0.25, 0.5, 1.0, 2.0, 3.0, 6.0, 12.0, 24.0, 48.0, 168.0, 336.0, 720.0)
SAMPLES_PER_LINE = 64
MAX_LINES_PER_AXIS = 24


def round_ticks(low: float, high: float, *, target: int = 6) -> list[float]:
    """Round values (1, 2 or 5 times a power of ten) between ``low`` and ``high``, about ``target`` of them."""
    if not (math.isfinite(low) and math.isfinite(high)) or high <= low:
        return []
    raw = (high - low) / max(target, 1)
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1.0, 2.0, 5.0, 10.0) if m * power >= raw)
    first = math.ceil(low / step - 1e-9) * step
    count = math.floor((high - first) / step + 1e-9) + 1
    return [round(first + k * step, 12) for k in range(min(count, MAX_LINES_PER_AXIS))]


def hour_ticks(low: float, high: float, *, target: int = 8) -> list[float]:
    """Round hours between ``low`` and ``high`` (steps of 1/4 h up to 30 days)."""
    if not (math.isfinite(low) and math.isfinite(high)) or high <= low:
        return []
    step = next((s for s in HOUR_STEPS if (high - low) / s <= target), HOUR_STEPS[-1])
    first = math.ceil(low / step - 1e-9) * step
    count = math.floor((high - first) / step + 1e-9) + 1
    return [first + k * step for k in range(min(count, MAX_LINES_PER_AXIS))]


def decade_ticks(low: float, high: float) -> list[float]:
    """Powers of ten (and 2x, 5x when the range spans under three decades) between ``low`` and ``high`` > 0."""
    if not (low > 0 and high > low and math.isfinite(high)):
        return []
    first, last = math.floor(math.log10(low)), math.ceil(math.log10(high))
    factors = (1.0,) if last - first >= 3 else (1.0, 2.0, 5.0)
    ticks = [f * 10.0**k for k in range(first, last + 1) for f in factors]
    return [t for t in ticks if low * (1 - 1e-9) <= t <= high * (1 + 1e-9)][:MAX_LINES_PER_AXIS]


def ticks_for(scale: str, low: float, high: float) -> list[float]:
    if scale == "log10":
        return decade_ticks(low, high)
    if scale == "time":
        return hour_ticks(low, high)
    return round_ticks(low, high)


def _along(scale: str, low: float, high: float) -> FloatArray:
    if scale == "log10" and low > 0:
        return np.geomspace(low, high, SAMPLES_PER_LINE)
    return np.linspace(low, high, SAMPLES_PER_LINE)


def _pieces(pixels: FloatArray) -> list[list[list[float]]]:
    """Split a mapped line where it leaves the calibration (NaN), dropping pieces of a single point."""
    finite = [math.isfinite(u) and math.isfinite(v) for u, v in pixels.tolist()]
    pieces: list[list[list[float]]] = []
    current: list[list[float]] = []
    for ok, point in zip(finite, pixels.tolist(), strict=True):
        if ok:
            current.append([round(point[0], 2), round(point[1], 2)])
            continue
        if len(current) > 1:
            pieces.append(current)
        current = []
    if len(current) > 1:
        pieces.append(current)
    return pieces


def _line(mapping: ChartMapping, axis: str, value: float, values: FloatArray, label: str) -> list[dict[str, Any]]:
    fixed = np.full_like(values, value)
    pairs = np.column_stack([fixed, values] if axis == "x" else [values, fixed])
    with np.errstate(all="ignore"):
        pixels = mapping.values_to_pixels(pairs)
    return [{"axis": axis, "value": value, "label": label, "points": piece} for piece in _pieces(pixels)]


def _ranges(mapping: ChartMapping, spec: Mapping[str, Any], size: tuple[int, int]) -> tuple[FloatArray, FloatArray]:
    """(x low, x high), (y low, y high): spanned by the control points, else by the sheet's corners and edges."""
    width, height = size
    grid = np.array([[u, v] for u in np.linspace(0, width, 9) for v in np.linspace(0, height, 9)], dtype=np.float64)
    with np.errstate(all="ignore"):
        values = mapping.pixels_to_values(grid)
    points = [p.get("value") for p in spec.get("control_points") or [] if isinstance(p, Mapping)]
    numeric = [v for v in points if isinstance(v, list) and all(isinstance(c, int | float) for c in v)]
    out = []
    for axis in (0, 1):
        known = [float(v[axis]) for v in numeric if len(v) == 2]
        if len(set(known)) >= 2:
            out.append(np.array([min(known), max(known)]))
            continue
        column = values[:, axis][np.isfinite(values[:, axis])]
        out.append(np.array([column.min(), column.max()]) if column.size else np.array([np.nan, np.nan]))
    return out[0], out[1]


def _label(value: float, unit: str) -> str:
    text = f"{value:g}"
    return f"{text} {unit}".strip()


def cartesian_grid(mapping: ChartMapping, spec: Mapping[str, Any], size: tuple[int, int]) -> list[dict[str, Any]]:
    """Grid lines of a cartesian, curvilinear or strip-speed calibration as pixel polylines."""
    x_range, y_range = _ranges(mapping, spec, size)
    x_axis = spec.get("x_axis") if isinstance(spec.get("x_axis"), Mapping) else {"scale": "time"}
    y_axis = spec.get("y_axis") if isinstance(spec.get("y_axis"), Mapping) else {"scale": "linear"}
    assert isinstance(x_axis, Mapping) and isinstance(y_axis, Mapping)
    x_scale, y_scale = str(x_axis.get("scale", "linear")), str(y_axis.get("scale", "linear"))
    if spec.get("kind") == "strip_speed":
        x_scale = "time"
    lines: list[dict[str, Any]] = []
    if not (np.isfinite(x_range).all() and np.isfinite(y_range).all()):
        return lines
    x_unit = "h" if x_scale == "time" else str(x_axis.get("unit") or "")
    for tick in ticks_for(x_scale, *x_range.tolist()):
        lines += _line(mapping, "x", tick, _along(y_scale, *y_range.tolist()), _label(tick, x_unit))
    for tick in ticks_for(y_scale, *y_range.tolist()):
        lines += _line(
            mapping, "y", tick, _along(x_scale, *x_range.tolist()), _label(tick, str(y_axis.get("unit") or ""))
        )
    return lines


def circular_grid(mapping: ChartMapping, spec: Mapping[str, Any]) -> list[dict[str, Any]]:
    """Rings at round values and time lines at round hours of a circular calibration."""
    axis = spec.get("value_axis")
    period = float(spec.get("period_hours") or 0.0)
    if not isinstance(axis, Mapping) or not period > 0:
        return []
    low, high = float(axis.get("min", 0.0)), float(axis.get("max", 0.0))
    scale = str(axis.get("scale", "linear"))
    lines: list[dict[str, Any]] = []
    hours = np.linspace(0.0, period, 4 * SAMPLES_PER_LINE)
    for tick in ticks_for(scale, low, high):
        lines += _line(mapping, "y", tick, hours, _label(tick, str(axis.get("unit") or "")))
    step = next((s for s in HOUR_STEPS if period / s <= 12), period)
    for tick in np.arange(0.0, period - 1e-9, step).tolist():
        lines += _line(mapping, "x", tick, _along(scale, low, high), _label(tick, "h"))
    return lines


def grid_lines(mapping: ChartMapping, spec: Mapping[str, Any], size: tuple[int, int]) -> list[dict[str, Any]]:
    """Grid polylines ``[{"axis", "value", "label", "points": [[u, v], ...]}]`` for any calibration kind."""
    if spec.get("kind") == "circular":
        return circular_grid(mapping, spec)
    return cartesian_grid(mapping, spec, size)
