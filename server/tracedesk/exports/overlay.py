"""A picture for the visual check: the scan, lightened, with every trace and fitted curve drawn over it (Pillow).

Coordinates are continuous sheet pixels (origin at the top-left corner of the top-left pixel, ARCHITECTURE.md).
Pillow draws at integer pixel indices, i.e. its point (i, j) is the centre of pixel (i, j), which is the
continuous point (i + 0.5, j + 0.5); so a continuous point (u, v) is drawn at (u * sx - 0.5, v * sy - 0.5) on an
image scaled by (sx, sy). Getting this wrong shifts every line by half a pixel (tested).
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray
from PIL import Image, ImageDraw, ImageFont
from sqlalchemy.orm import Session

from tracedesk.digitizing.calibrations import calibration_of, mapping_of
from tracedesk.digitizing.fits import fits_of_trace, refit
from tracedesk.digitizing.sheet_image import load_sheet_image
from tracedesk.digitizing.traces import trace_pixels, traces_of_sheet
from tracedesk.errors import AppError
from tracedesk.models import Sheet, Trace
from tracedesk.science.errors import ScienceInputError
from tracedesk.storage import FileStore

FloatArray = NDArray[np.float64]
TRACE_COLOURS = ("#d1006f", "#6a1fd1", "#c05a00", "#00708a", "#4d7f00")
SECOND_SET_COLOURS = ("#0057d1", "#008a5e", "#8a6d00", "#7a0099", "#b3001b")
FIT_COLOUR = "#00a37a"
MARK_COLOUR = "#e00000"
CURVE_POINTS = 600
SCAN_LIGHTEN = 0.35  # blend towards white so the drawn lines stand out while the pen ink stays visible


@dataclass(frozen=True)
class Polyline:
    """Points in continuous sheet pixels, shape (n, 2), drawn in ``colour``; ``label`` goes into the legend."""

    points: FloatArray
    colour: str
    label: str
    width: int = 2


@dataclass(frozen=True)
class Mark:
    """A circle around a sheet position (pixels), e.g. where two technicians' traces differ most."""

    u: float
    v: float
    label: str


@dataclass
class OverlayContent:
    lines: list[Polyline] = field(default_factory=list)
    marks: list[Mark] = field(default_factory=list)


def to_drawing(points: FloatArray, scale: tuple[float, float]) -> list[tuple[float, float]]:
    """Continuous sheet pixels -> Pillow drawing coordinates on an image scaled by ``scale`` (see module doc)."""
    sx, sy = scale
    return [(float(u) * sx - 0.5, float(v) * sy - 0.5) for u, v in points]


def _finite_runs(points: FloatArray) -> list[FloatArray]:
    """Split a polyline where it has non-finite points (gaps are not bridged)."""
    mask: NDArray[np.bool_] = np.asarray(np.isfinite(points).all(axis=1))
    finite = [bool(flag) for flag in mask]
    runs: list[FloatArray] = []
    start = None
    for index, ok in enumerate([*finite, False]):
        if ok and start is None:
            start = index
        elif not ok and start is not None:
            runs.append(points[start:index])
            start = None
    return runs


def _base_image(image: NDArray[np.uint8], max_side: int) -> tuple[Image.Image, tuple[float, float]]:
    height, width = image.shape[:2]
    factor = min(1.0, max_side / max(width, height))
    picture = Image.fromarray(image)
    if factor < 1.0:
        size = (max(1, round(width * factor)), max(1, round(height * factor)))
        picture = picture.resize(size, Image.Resampling.LANCZOS)
    white = Image.new("RGB", picture.size, (255, 255, 255))
    picture = Image.blend(picture, white, SCAN_LIGHTEN)
    return picture, (picture.width / width, picture.height / height)


def draw_overlay(image: NDArray[np.uint8], content: OverlayContent, *, max_side: int = 4000) -> Image.Image:
    """The scan (scaled so its longer side is at most ``max_side`` px) with ``content`` drawn over it."""
    picture, scale = _base_image(image, max_side)
    draw = ImageDraw.Draw(picture)
    for line in content.lines:
        for run in _finite_runs(line.points):
            coordinates = to_drawing(run, scale)
            if len(coordinates) == 1:
                x, y = coordinates[0]
                draw.ellipse((x - line.width, y - line.width, x + line.width, y + line.width), fill=line.colour)
            else:
                draw.line(coordinates, fill=line.colour, width=line.width, joint="curve")
    for mark in content.marks:
        (x, y), radius = to_drawing(np.array([[mark.u, mark.v]]), scale)[0], 12
        draw.ellipse((x - radius, y - radius, x + radius, y + radius), outline=MARK_COLOUR, width=3)
    _legend(draw, content)
    return picture


def _legend(draw: ImageDraw.ImageDraw, content: OverlayContent) -> None:
    entries = [(line.label, line.colour) for line in content.lines if line.label]
    entries += [(mark.label, MARK_COLOUR) for mark in content.marks if mark.label]
    if not entries:
        return
    font = ImageFont.load_default(size=14)
    height = 18 * len(entries) + 8
    width = 12 + max(int(draw.textlength(label, font=font)) for label, _ in entries) + 30
    draw.rectangle((4, 4, 4 + width, 4 + height), fill=(255, 255, 255), outline=(80, 80, 80))
    for index, (label, colour) in enumerate(entries):
        y = 10 + 18 * index
        draw.rectangle((10, y + 3, 30, y + 11), fill=colour)
        draw.text((36, y - 2), label, fill=(20, 20, 20), font=font)


def fit_curve_pixels(session: Session, trace: Trace, fit_id: int | None = None) -> list[tuple[int, FloatArray]]:
    """(fit id, curve in sheet pixels) for each (or one) non-stale fit of ``trace``, over the fit's domain."""
    row = calibration_of(session, trace.sheet_id)
    if row is None:
        return []
    mapping = mapping_of(row)
    curves = []
    for fit in fits_of_trace(session, trace.id):
        if fit.stale or (fit_id is not None and fit.id != fit_id):
            continue
        try:
            result = refit(session, fit, trace)
        except (AppError, ScienceInputError, ValueError):
            continue  # a fit that cannot be recomputed is reported in the fits table, not drawn
        low, high = json.loads(fit.result)["domain"]
        x = np.linspace(float(low), float(high), CURVE_POINTS)
        pixels = mapping.values_to_pixels(np.column_stack([x, result.predict(x)]))
        curves.append((fit.id, np.asarray(pixels, dtype=np.float64)))
    return curves


def sheet_content(
    session: Session,
    sheet: Sheet,
    *,
    second_author: int | None = None,
    marks: Sequence[Mark] = (),
) -> OverlayContent:
    """Every live trace of the sheet (traces by ``second_author`` in a second palette) and its fitted curves."""
    content = OverlayContent(marks=list(marks))
    first_index = second_index = 0
    for trace in traces_of_sheet(session, sheet.id):
        if second_author is not None and trace.created_by_id == second_author:
            colour, second_index = SECOND_SET_COLOURS[second_index % len(SECOND_SET_COLOURS)], second_index + 1
        else:
            colour, first_index = TRACE_COLOURS[first_index % len(TRACE_COLOURS)], first_index + 1
        content.lines.append(Polyline(trace_pixels(trace), colour, f"trace {trace.id}: {trace.name}"))
        for fit_id, curve in fit_curve_pixels(session, trace):
            content.lines.append(Polyline(curve, FIT_COLOUR, f"fit {fit_id} of trace {trace.id}", width=1))
    return content


def render_sheet_overlay(
    session: Session,
    store: FileStore,
    sheet: Sheet,
    *,
    max_side: int = 4000,
    second_author: int | None = None,
    marks: Sequence[Mark] = (),
) -> Image.Image:
    content = sheet_content(session, sheet, second_author=second_author, marks=marks)
    return draw_overlay(load_sheet_image(store, sheet.derived_key), content, max_side=max_side)
