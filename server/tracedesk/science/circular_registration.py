"""Automatic registration of a circular chart: rings, time zero, and a ready circular calibration.

:func:`register_circular_chart` puts together

1. the centre and the value rings (:func:`~tracedesk.science.circle_detection.detect_circular_chart`);
2. the time-zero line from the printed time lines and the spec's reference angle
   (:func:`~tracedesk.science.time_lines.find_time_zero`), with the pen arm for arc-shaped lines;
3. a ``circular`` calibration (:func:`~tracedesk.science.calibration.build_calibration`) whose check
   points are measured crossings of time lines and rings: up to :data:`CHECK_RINGS` rings spread over
   the value axis times up to :data:`CHECK_LINES` time lines spread round the chart, each at the ring's
   fitted radius and the line's own measured angle. Their residuals are how far the even comb of time
   lines and the straight radius law miss what was measured.

JSON shape of :meth:`CircularRegistration.to_dict`: the ring detection's fields (``centre``, ``rings``,
``value_axis``, ``ring_rms_px``, ``radius_law_rms_px``), plus ``"time_zero"``
(:meth:`~tracedesk.science.time_lines.TimeZero.to_dict`), ``"calibration"`` (ready for
``build_calibration``), ``"control_points"`` (the check points), ``"residuals"`` (the calibration's
residual report), ``"confidence"``, ``"confidence_factors"`` (``match``, ``rings``, ``residuals``,
``time_lines``), ``"rotation_deg"`` (how far the scan is turned, clockwise positive),
``"orientation"`` and ``"warnings"``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Final

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.calibration import build_calibration
from tracedesk.science.circle_detection import CircularDetection, detect_circular_chart
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.grid_likelihood import grid_colour_model_for
from tracedesk.science.grid_spec import CircularChartSpec
from tracedesk.science.time_lines import TimeZero, find_time_zero

FloatArray = NDArray[np.float64]

CHECK_RINGS: Final = 6
CHECK_LINES: Final = 8
MIN_CONFIDENCE: Final = 0.2


@dataclass(frozen=True)
class CircularRegistration:
    """Rings, time zero and the calibration of a circular chart (module docstring for the JSON shape)."""

    rings: CircularDetection
    time_zero: TimeZero
    calibration_spec: dict[str, Any]
    residual_report: dict[str, Any]
    confidence: float
    confidence_factors: dict[str, float]

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary (module docstring)."""
        rings = self.rings.to_dict()
        return {
            **rings,
            "time_zero": self.time_zero.to_dict(),
            "calibration": self.calibration_spec,
            "control_points": self.calibration_spec["check_points"],
            "residuals": self.residual_report,
            "confidence": self.confidence,
            "confidence_factors": dict(self.confidence_factors),
            "rotation_deg": self.time_zero.offset_deg,
            "orientation": "upright",
            "warnings": [*rings["warnings"], *self.time_zero.warnings],
        }


def _spread(count: int, most: int) -> list[int]:
    """Up to ``most`` indices of ``range(count)`` spread evenly, both ends included."""
    if count <= most:
        return list(range(count))
    return sorted({int(i) for i in np.linspace(0, count - 1, most).round()})


def _check_points(rings: CircularDetection, time_zero: TimeZero) -> list[dict[str, list[float]]]:
    """Measured crossings of time lines and rings, with their (hours, value)."""
    measured = [i for i in range(rings.ring_values.size) if np.isfinite(rings.ring_radii_px[i])]
    lines = _spread(len(time_zero.line_hours), CHECK_LINES)
    points = []
    for index in (measured[i] for i in _spread(len(measured), CHECK_RINGS)):
        pixels = time_zero.line_pixels(float(rings.ring_radii_px[index]))
        for line in lines:
            points.append(
                {
                    "pixel": [float(pixels[line, 0]), float(pixels[line, 1])],
                    "value": [time_zero.line_hours[line], float(rings.ring_values[index])],
                }
            )
    return points


def _calibration(spec: CircularChartSpec, rings: CircularDetection, time_zero: TimeZero) -> dict[str, Any]:
    calibration: dict[str, Any] = {
        "kind": "circular",
        "centre": list(rings.centre),
        "value_axis": rings.value_axis(),
        "period_hours": spec.period_hours,
        "time_zero_pixel": list(time_zero.pixel),
        "time_direction": spec.time_direction,
        "check_points": _check_points(rings, time_zero),
    }
    if time_zero.pen_arm is not None:
        calibration["pen_arc"] = time_zero.pen_arm
    return calibration


def register_circular_chart(image: NDArray[np.uint8], spec: CircularChartSpec) -> CircularRegistration:
    """Find rings and time zero and build the circular calibration (module docstring).

    Parameters
    ----------
    image : ndarray of uint8, shape (H, W, 3)
        The sheet, sRGB, in stored-image pixels.
    spec : CircularChartSpec
        The printed geometry, with ``time_line_hours``, ``time_zero_angle_deg`` and ``time_direction``.

    Raises
    ------
    ScienceInputError
        Whenever the rings or time zero are refused (the message says why), or the confidence is below
        :data:`MIN_CONFIDENCE`.
    """
    array = np.ascontiguousarray(image)
    model = grid_colour_model_for(
        array, grid_colour=spec.grid_colour, tolerance=spec.colour_tolerance, pen_colours=spec.pen_colours
    )
    rings = detect_circular_chart(array, spec, model=model)
    time_zero = find_time_zero(
        array, spec, model, centre=rings.centre, radius_min_px=rings.radius_min_px, radius_max_px=rings.radius_max_px
    )
    calibration = _calibration(spec, rings, time_zero)
    report = build_calibration(calibration).residual_report.to_dict()
    factors = {**rings.confidence_factors, "time_lines": time_zero.confidence}
    confidence = float(np.prod(list(factors.values())))
    if confidence < MIN_CONFIDENCE:
        raise ScienceInputError(f"circular registration too uncertain (confidence {confidence:.2f}, factors {factors})")
    return CircularRegistration(rings, time_zero, calibration, report, confidence, factors)
