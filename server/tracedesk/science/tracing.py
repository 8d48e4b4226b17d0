"""Automatic pen tracing: find one pen line of a given colour in a region of a sheet image.

Pipeline (each step in its own module):

1. ``pen_likelihood``: score every pixel by its CIEDE2000 difference to the pen colour (a lookup table
   over quantised sRGB), reduced to the block maximum over coarse cells of ``block`` x ``block`` px.
2. ``path_search``: the best path through the coarse cells, one row per column, by dynamic programming
   (continuity cost for jumps through background). Circular charts are first unwrapped to an
   angle x radius grid (``polar_unwrap``) and traced over angle columns.
3. ``pen_runs``: in a window around that path, the pen's run of pixels in every full-resolution column
   (a pixel column, or a radial line); columns without pen are gaps - bridged by the path, but they
   get no vertex.
4. ``subpixel``: the coverage-weighted centroid across each run.
5. ``trace_quality``: pen width, per-vertex confidence, gap spans.

Coordinates are sheet pixels (origin at the top-left corner of the top-left pixel, u right, v down, pixel
(i, j) centred at (i + 0.5, j + 0.5)); vertices are reported in the same frame for every region kind.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Literal, NoReturn

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.colour import colour_to_lab
from tracedesk.science.column_samplers import PixelColumnSampler, PolarSampler
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.path_search import search_optimal_rows
from tracedesk.science.pen_likelihood import (
    ChunkMask,
    CoarseGrid,
    PenColourModel,
    build_pen_colour_model,
    coarse_score_map,
    nearest_colour_difference,
)
from tracedesk.science.pen_runs import ColumnSampler, choose_pen_runs
from tracedesk.science.polar_unwrap import PolarGrid, angle_of_point_deg, unwrap_map
from tracedesk.science.subpixel import ColumnCentres, refine_centres
from tracedesk.science.trace_quality import estimate_line_width, gap_spans, local_slope, vertex_confidence
from tracedesk.science.trace_regions import (
    AnnulusRegion,
    BoxRegion,
    PixelWindow,
    PolygonRegion,
    box_window,
    check_annulus,
    polygon_row_mask,
    polygon_vertices,
    polygon_window,
)

FloatArray = NDArray[np.float64]
IndexArray = NDArray[np.intp]
ProgressCallback = Callable[[float], None]
TraceRegion = BoxRegion | PolygonRegion | AnnulusRegion

DEFAULT_TOLERANCE = 20.0
DEFAULT_CONTINUITY_WEIGHT = 0.5
# Cost per coarse row crossed even over pen, relative to continuity_weight: keeps jumps short on ties.
STEP_WEIGHT_FRACTION = 0.05
# The coarse grid is kept to about this many cells along its longer side (dynamic programming cost).
COARSE_CELLS_TARGET = 1000
# Extra pixels searched beyond the coarse cells next to the path.
WINDOW_MARGIN_PX = 2
# Share of the progress bar spent on the colour pass and on the path search.
PROGRESS_COLOUR, PROGRESS_PATH = 0.6, 0.85


@dataclass(frozen=True)
class TraceResult:
    """One traced pen line.

    Attributes
    ----------
    vertices : numpy.ndarray, shape (n, 2)
        (u, v) sheet pixels, one per column with pen: ordered by u for boxes and polygons, clockwise
        by angle for annuli.
    confidence : numpy.ndarray, shape (n,)
        Per-vertex confidence in [0, 1] (colour closeness times line-likeness of the inked length).
    gap_spans : list of (float, float)
        Stretches with no pen, as (start, end): u in px for boxes and polygons (outer column edges),
        angles in degrees clockwise from +u for annuli (may exceed 360 when the arc wraps).
    gap_unit : {"u_px", "angle_deg"}
        Unit of ``gap_spans``.
    coverage : float
        Fraction of the traced columns that have a vertex, in [0, 1].
    line_width_px : float
        Estimated pen width across the line (px).
    pen_lab : numpy.ndarray, shape (3,)
        Pen colour used (CIELAB, D65).
    """

    vertices: FloatArray
    confidence: FloatArray
    gap_spans: list[tuple[float, float]]
    gap_unit: Literal["u_px", "angle_deg"]
    coverage: float
    line_width_px: float
    pen_lab: FloatArray


@dataclass(frozen=True)
class _SearchOptions:
    continuity_weight: float
    progress: ProgressCallback | None


def trace_pen(
    image: NDArray[np.uint8],
    *,
    pen_colour: str | Sequence[float],
    region: TraceRegion,
    pen_colour_space: Literal["srgb", "lab"] = "srgb",
    tolerance: float = DEFAULT_TOLERANCE,
    start_uv: tuple[float, float] | None = None,
    end_uv: tuple[float, float] | None = None,
    continuity_weight: float = DEFAULT_CONTINUITY_WEIGHT,
    progress: ProgressCallback | None = None,
) -> TraceResult:
    """Trace one pen line of the given colour through a region of a sheet.

    Parameters
    ----------
    image : numpy.ndarray of uint8, shape (H, W, 3)
        The sheet, sRGB.
    pen_colour : str or sequence of 3 floats
        ``"#rrggbb"``, or an sRGB triple on the 0-255 scale (e.g. sampled from the scan), or a CIELAB
        triple with ``pen_colour_space="lab"``.
    region : BoxRegion, PolygonRegion or AnnulusRegion
        Where to look (sheet pixels). Boxes and polygons are traced over pixel columns (the pen as a
        function of u); an annulus over angle, clockwise, from its start angle.
    pen_colour_space : {"srgb", "lab"}
        How to read a numeric ``pen_colour``.
    tolerance : float
        Largest CIEDE2000 difference from the pen colour that still counts as pen (default 20).
    start_uv, end_uv : (float, float), optional
        Points on the pen where the trace starts / ends (sheet px). For boxes and polygons they limit
        the traced columns (the leftmost point is the start); for an annulus they set the arc,
        clockwise from start to end. Both also pull the path towards them.
    continuity_weight : float
        Cost of jumping one pixel through background, relative to the reward of one pixel of pen
        (larger: stiffer path, smaller: follows specks more readily). Default 0.5.
    progress : callable, optional
        Called with the fraction done (0-1) as the work proceeds.

    Returns
    -------
    TraceResult

    Raises
    ------
    ScienceInputError
        Bad image, region outside the sheet or empty, bad tolerance or colour, or no pixel in the
        region within the tolerance of the pen colour (the message gives the nearest difference).
    """
    _check_image(image)
    if not (math.isfinite(continuity_weight) and continuity_weight > 0.0):
        raise ScienceInputError(f"continuity_weight must be a positive number, got {continuity_weight!r}")
    model = build_pen_colour_model(colour_to_lab(pen_colour, space=pen_colour_space), tolerance=tolerance)
    for point in (start_uv, end_uv):
        _check_point(point, image.shape)
    options = _SearchOptions(float(continuity_weight), progress)
    if isinstance(region, AnnulusRegion):
        result = _trace_annulus(image, model, region, start_uv, end_uv, options)
    elif isinstance(region, PolygonRegion):
        vertices = polygon_vertices(region, image.shape)
        result = _trace_columns(image, model, polygon_window(vertices), vertices, start_uv, end_uv, options)
    elif isinstance(region, BoxRegion):
        result = _trace_columns(image, model, box_window(region, image.shape), None, start_uv, end_uv, options)
    else:
        raise ScienceInputError(f"unknown region type {type(region).__name__}")
    if progress is not None:
        progress(1.0)
    return result


def _check_image(image: NDArray[np.uint8]) -> None:
    if not isinstance(image, np.ndarray) or image.dtype != np.uint8:
        raise ScienceInputError("the sheet image must be a uint8 numpy array")
    if image.ndim != 3 or image.shape[2] != 3 or image.shape[0] < 1 or image.shape[1] < 1:
        raise ScienceInputError(f"the sheet image must have shape (H, W, 3), got {image.shape}")


def _check_point(point: tuple[float, float] | None, shape: tuple[int, ...]) -> None:
    if point is None:
        return
    u, v = (float(x) for x in point)
    if not (math.isfinite(u) and math.isfinite(v)) or not (0.0 <= u <= shape[1] and 0.0 <= v <= shape[0]):
        raise ScienceInputError(f"start/end point {point!r} is not on the sheet")


def _progress_slice(progress: ProgressCallback | None, low: float, high: float) -> ProgressCallback | None:
    if progress is None:
        return None
    return lambda fraction: progress(low + (high - low) * fraction)


def _block_size(longest_side_px: float) -> tuple[int, int]:
    """Coarse cell size (px) and column step: about COARSE_CELLS_TARGET cells along the longer side."""
    block = max(1, math.ceil(longest_side_px / COARSE_CELLS_TARGET))
    if block >= 4:
        block += block % 2  # even, so that reading every second column tiles the cells exactly
        return block, 2
    return block, 1


def _fine_windows(coarse_rows: IndexArray, block: int, n_columns: int) -> tuple[IndexArray, IndexArray]:
    """Search window [lo, hi) in fine positions for every fine column, from the coarse path.

    A coarse step between columns may be a steep stroke in either column, so each window spans the
    path in the neighbouring coarse columns too, plus one cell and a small margin either side.
    """
    previous = np.concatenate([coarse_rows[:1], coarse_rows[:-1]])
    following = np.concatenate([coarse_rows[1:], coarse_rows[-1:]])
    low = np.minimum(np.minimum(previous, coarse_rows), following)
    high = np.maximum(np.maximum(previous, coarse_rows), following)
    coarse_of_fine = np.arange(n_columns) // block
    lo = (low[coarse_of_fine] - 1) * block - WINDOW_MARGIN_PX
    hi = (high[coarse_of_fine] + 2) * block + WINDOW_MARGIN_PX
    return lo.astype(np.intp), hi.astype(np.intp)


def _refuse_absent(
    image: NDArray[np.uint8], grid: CoarseGrid, model: PenColourModel, mask: ChunkMask | None
) -> NoReturn:
    nearest = nearest_colour_difference(image, grid, model, mask=mask)
    raise ScienceInputError(
        f"pen colour not found in the region: the nearest colour there differs by about "
        f"{nearest:.1f} (CIEDE2000), more than the tolerance {model.tolerance:g}"
    )


def _restrict_columns(
    window: PixelWindow, start_uv: tuple[float, float] | None, end_uv: tuple[float, float] | None
) -> tuple[PixelWindow, tuple[float, float] | None, tuple[float, float] | None]:
    """Limit the columns to the start/end points; the leftmost given point becomes the start."""
    if start_uv is not None and end_uv is not None and start_uv[0] > end_uv[0]:
        start_uv, end_uv = end_uv, start_uv
    col_start, col_stop = window.col_start, window.col_stop
    if start_uv is not None:
        col_start = max(col_start, math.ceil(start_uv[0] - 0.5))
    if end_uv is not None:
        col_stop = min(col_stop, math.floor(end_uv[0] - 0.5) + 1)
    if col_stop <= col_start:
        raise ScienceInputError("the start and end points leave no pixel column of the region to trace")
    return PixelWindow(window.row_start, window.row_stop, col_start, col_stop), start_uv, end_uv


def _polygon_mask(vertices: FloatArray) -> ChunkMask:
    def mask(first: int, count: int, col_start: int, col_stop: int, step: int) -> NDArray[np.bool_]:
        rows = np.arange(first, first + count)
        return polygon_row_mask(vertices, rows=rows, columns=np.arange(col_start, col_stop, step))

    return mask


def _trace_columns(
    image: NDArray[np.uint8],
    model: PenColourModel,
    window: PixelWindow,
    polygon: FloatArray | None,
    start_uv: tuple[float, float] | None,
    end_uv: tuple[float, float] | None,
    options: _SearchOptions,
) -> TraceResult:
    window, start_uv, end_uv = _restrict_columns(window, start_uv, end_uv)
    block, step = _block_size(max(window.col_stop - window.col_start, window.row_stop - window.row_start))
    grid = CoarseGrid(window.row_start, window.row_stop, window.col_start, window.col_stop, block, step)
    mask = _polygon_mask(polygon) if polygon is not None else None
    coarse = coarse_score_map(
        image, grid, model, mask=mask, progress=_progress_slice(options.progress, 0.0, PROGRESS_COLOUR)
    )
    if not coarse.any():
        _refuse_absent(image, grid, model, mask)

    def anchor(point: tuple[float, float] | None) -> float | None:
        return None if point is None else (point[1] - window.row_start) / block - 0.5

    rows = search_optimal_rows(
        coarse / 255.0,
        continuity_weight=options.continuity_weight,
        step_weight=STEP_WEIGHT_FRACTION * options.continuity_weight,
        start_row=anchor(start_uv),
        end_row=anchor(end_uv),
        progress=_progress_slice(options.progress, PROGRESS_COLOUR, PROGRESS_PATH),
    )
    sampler = PixelColumnSampler(image, window, polygon)
    centres = _find_centres(sampler, model, rows, block)
    columns = np.flatnonzero(centres.found)
    u = window.col_start + columns.astype(np.float64) + 0.5
    v = window.row_start + centres.centre[columns]
    edges = window.col_start + np.arange(sampler.n_columns + 1, dtype=np.float64)
    return _assemble(model, centres, np.column_stack([u, v]), across=u, along=v, edges=edges, unit="u_px")


def _find_centres(sampler: ColumnSampler, model: PenColourModel, rows: IndexArray, block: int) -> ColumnCentres:
    lo, hi = _fine_windows(rows, block, sampler.n_columns)
    runs = choose_pen_runs(sampler, model, window_lo=lo, window_hi=hi)
    if not runs.found.any():
        raise ScienceInputError(
            f"pen colour not found along the best path: no pixel within the tolerance {model.tolerance:g}"
        )
    return refine_centres(sampler, model, runs)


def _assemble(
    model: PenColourModel,
    centres: ColumnCentres,
    vertices: FloatArray,
    *,
    across: FloatArray,
    along: FloatArray,
    edges: FloatArray,
    unit: Literal["u_px", "angle_deg"],
) -> TraceResult:
    found = centres.found
    width = estimate_line_width(centres.coverage[found], local_slope(across, along))
    # Judge each vertex against the line's slope over a few pen widths, not the next column's centroid.
    slope = local_slope(across, along, reach=max(1, round(2.0 * width)))
    confidence = vertex_confidence(
        peak_score=centres.peak_score[found],
        coverage=centres.coverage[found],
        slope=slope,
        line_width_px=width,
        touches_foreign=centres.touches_foreign[found],
    )
    return TraceResult(
        vertices=vertices,
        confidence=confidence,
        gap_spans=gap_spans(found, edges),
        gap_unit=unit,
        coverage=float(found.mean()),
        line_width_px=width,
        pen_lab=model.pen_lab,
    )


def _arc_of(
    annulus: AnnulusRegion, start_uv: tuple[float, float] | None, end_uv: tuple[float, float] | None
) -> tuple[float, float]:
    """Start angle and clockwise sweep (degrees) of the traced arc."""
    start = annulus.start_angle_deg if start_uv is None else angle_of_point_deg(annulus.centre_uv, start_uv)
    if end_uv is None:
        return start, annulus.sweep_deg
    sweep = (angle_of_point_deg(annulus.centre_uv, end_uv) - start) % 360.0
    return start, sweep if sweep > 0.0 else 360.0


def _ring_window(annulus: AnnulusRegion, shape: tuple[int, ...]) -> PixelWindow:
    cu, cv = annulus.centre_uv
    r = annulus.radius_max_px
    return PixelWindow(
        row_start=max(0, math.floor(cv - r)),
        row_stop=min(shape[0], math.ceil(cv + r)),
        col_start=max(0, math.floor(cu - r)),
        col_stop=min(shape[1], math.ceil(cu + r)),
    )


def _ring_mask(annulus: AnnulusRegion) -> ChunkMask:
    def mask(first: int, count: int, col_start: int, col_stop: int, step: int) -> NDArray[np.bool_]:
        dv = np.arange(first, first + count)[:, None] + 0.5 - annulus.centre_uv[1]
        du = np.arange(col_start, col_stop, step)[None, :] + 0.5 - annulus.centre_uv[0]
        radius_sq = du**2 + dv**2
        return (radius_sq >= annulus.radius_min_px**2) & (radius_sq <= annulus.radius_max_px**2)

    return mask


def _polar_grids(annulus: AnnulusRegion, start_deg: float, sweep_deg: float, block: int) -> tuple[PolarGrid, PolarGrid]:
    """Coarse grid (cells of ``block`` px at the outer radius) and the fine grid (1 px) inside it."""
    ring_px = annulus.radius_max_px - annulus.radius_min_px
    n_radii = max(1, math.ceil(ring_px / block))
    n_angles = max(2, math.ceil(math.radians(sweep_deg) * annulus.radius_max_px / block))
    angle_step = math.radians(sweep_deg) / n_angles
    start = math.radians(start_deg)
    coarse = PolarGrid(annulus.centre_uv, annulus.radius_min_px, block, n_radii, start, angle_step, n_angles)
    fine = PolarGrid(
        annulus.centre_uv, annulus.radius_min_px, 1.0, n_radii * block, start, angle_step / block, n_angles * block
    )
    return coarse, fine


def _trace_annulus(
    image: NDArray[np.uint8],
    model: PenColourModel,
    annulus: AnnulusRegion,
    start_uv: tuple[float, float] | None,
    end_uv: tuple[float, float] | None,
    options: _SearchOptions,
) -> TraceResult:
    check_annulus(annulus, image.shape)
    start_deg, sweep_deg = _arc_of(annulus, start_uv, end_uv)
    window = _ring_window(annulus, image.shape)
    arc_px = math.radians(sweep_deg) * annulus.radius_max_px
    block, step = _block_size(max(arc_px, annulus.radius_max_px - annulus.radius_min_px))
    grid = CoarseGrid(window.row_start, window.row_stop, window.col_start, window.col_stop, block, step)
    coarse = coarse_score_map(image, grid, model, progress=_progress_slice(options.progress, 0.0, PROGRESS_COLOUR))
    coarse_polar, fine_polar = _polar_grids(annulus, start_deg, sweep_deg, block)
    reward = unwrap_map(
        coarse / 255.0, origin_uv=(window.col_start, window.row_start), cell_px=block, grid=coarse_polar
    )
    if not (reward > 0.0).any():
        _refuse_absent(image, grid, model, _ring_mask(annulus))

    def anchor(point: tuple[float, float] | None) -> float | None:
        if point is None:
            return None
        radius = math.hypot(point[0] - annulus.centre_uv[0], point[1] - annulus.centre_uv[1])
        return (radius - annulus.radius_min_px) / block - 0.5

    rows = search_optimal_rows(
        reward,
        continuity_weight=options.continuity_weight,
        step_weight=STEP_WEIGHT_FRACTION * options.continuity_weight,
        start_row=anchor(start_uv),
        end_row=anchor(end_uv),
        progress=_progress_slice(options.progress, PROGRESS_COLOUR, PROGRESS_PATH),
    )
    sampler = PolarSampler(image, fine_polar, annulus.radius_max_px)
    centres = _find_centres(sampler, model, rows, block)
    return _polar_result(model, centres, fine_polar)


def _polar_result(model: PenColourModel, centres: ColumnCentres, grid: PolarGrid) -> TraceResult:
    columns = np.flatnonzero(centres.found)
    angle = grid.angle_rad(columns)
    radius = grid.radius_start_px + centres.centre[columns] * grid.radius_step_px
    u, v = grid.to_pixels(angle, radius)
    edges = np.degrees(grid.angle_start_rad + np.arange(grid.n_angles + 1) * grid.angle_step_rad)
    return _assemble(
        model, centres, np.column_stack([u, v]), across=angle * radius, along=radius, edges=edges, unit="angle_deg"
    )
