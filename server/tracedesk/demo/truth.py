"""What is known exactly about a rendered demo sheet: its pens, their functions and the chart geometry."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracedesk.demo.signals import Signal

FloatArray = NDArray[np.float64]


@dataclass(frozen=True)
class PenTruth:
    """One pen line as drawn.

    Attributes
    ----------
    name, unit : str
        What the pen records and its unit (e.g. "Reservoir level", "m").
    colour : str
        The ink, ``#rrggbb``.
    signal : Signal
        Value as a function of x (the chart's time unit).
    x : ndarray, shape (n,)
        Times at which the drawn centre line was sampled (dense, increasing).
    pixels : ndarray, shape (n, 2)
        The drawn centre line in scan pixels (u, v), one row per ``x``.
    width_px : float
        Line width (px).
    """

    name: str
    unit: str
    colour: str
    signal: Signal
    x: FloatArray
    pixels: FloatArray
    width_px: float


@dataclass(frozen=True)
class SheetTruth:
    """Everything needed to check a digitization of the sheet.

    Attributes
    ----------
    kind : str
        ``"circular"``, ``"strip"`` or ``"plot"``.
    width, height : int
        Image size (px).
    dpi : float
        Scan resolution (dots per inch).
    calibration : dict
        The exact calibration, in the JSON shape the digitizing service accepts (control points at their
        true pixels, or the true circular geometry).
    pens : tuple of PenTruth
        The pen lines.
    geometry : dict
        Chart geometry in scan pixels (centre, radii, pen arm, plot box corners ...), JSON-friendly.
    full_scale : float
        Span of the value axis (value units), to state errors as a fraction of full scale.
    """

    kind: str
    width: int
    height: int
    dpi: float
    calibration: dict[str, Any]
    pens: tuple[PenTruth, ...]
    geometry: dict[str, Any]
    full_scale: float

    def pen(self, name: str) -> PenTruth:
        """The pen called ``name``."""
        for pen in self.pens:
            if pen.name == name:
                return pen
        raise KeyError(name)


@dataclass(frozen=True)
class RenderedSheet:
    """A rendered scan (H, W, 3 uint8 sRGB) and its truth."""

    image: NDArray[np.uint8]
    truth: SheetTruth


def pen_pixels_at(pen: PenTruth, x: FloatArray) -> FloatArray:
    """Scan pixels of the pen at times ``x`` (interpolated along the dense drawn line)."""
    return np.column_stack([np.interp(x, pen.x, pen.pixels[:, 0]), np.interp(x, pen.x, pen.pixels[:, 1])])
