"""How much each pixel looks like printed grid ink: a paper-to-grid colour model and coarse score maps.

Grid ink on a scan is a mixture of paper and grid colour (thin lines cover pixels partly), so the model
is the colour *line* from the paper colour P to the grid colour G, not one colour. For a pixel colour c
(all in CIELAB, D65):

* ``t = (c - P) . (G - P) / |G - P|^2`` is how far along the line it lies (0 paper, 1 full grid ink);
* ``d = |c - P - t (G - P)|`` (CIE76) is how far off the line it lies: pens, handwriting and stains of
  other colours lie far off it;
* score = ``ramp(t) * max(0, 1 - d / tolerance)`` with ramp(t) = t on [0, 1], 1 up to t = 1.25 and
  falling to 0 at t = 1.6 (much darker or more saturated than the grid, such as a pen of the grid's
  hue, is not grid ink), zero for colours nearer an expected pen colour than the grid colour.

Whole sheets are scored through a table over sRGB quantised to 5 bits per channel (32768 entries), as
in :mod:`tracedesk.science.pen_likelihood`. Sub-pixel work uses :func:`grid_coverage`: the same
projection in sRGB code values (linear in the mixing, so centroids of it are unbiased), gated by the
table's "is grid ink or paper" flag.

Coarse maps are built per line family, reading only every ``2 * block``-th pixel row (for near-vertical
lines) or column (near-horizontal lines) and keeping the block maximum across: lines stay continuous
along their length, and the lines of the other family mostly drop out.

References
----------
CIE 15:2004 Colorimetry (CIELAB, CIE76 colour difference).
"""

from __future__ import annotations

import os
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Final

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.colour import delta_e_cie76, parse_hex_colour, srgb_to_lab
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.pen_likelihood import block_maximum

FloatArray = NDArray[np.float64]
ByteArray = NDArray[np.uint8]
ProgressCallback = Callable[[float], None]

RAMP_FLAT_END: Final = 1.25
RAMP_ZERO: Final = 1.6
# A grid colour this close to the paper (CIE76) cannot be told from it.
MIN_GRID_CONTRAST: Final = 5.0
CHUNK_LINES: Final = 64


def _colour_bins(pixels: ByteArray) -> NDArray[np.uint16]:
    """Index (r >> 3) << 10 | (g >> 3) << 5 | b >> 3 of 8-bit sRGB pixels (..., 3), as uint16."""
    shifted = pixels >> 3
    index = shifted[..., 0].astype(np.uint16)
    index <<= 5
    index |= shifted[..., 1]
    index <<= 5
    index |= shifted[..., 2]
    return index


def _table_colours() -> FloatArray:
    """sRGB code values (0-255) of the centres of the 32768 table bins, in table order."""
    centres = np.arange(32) * 8 + 3.5
    red, green, blue = np.meshgrid(centres, centres, centres, indexing="ij")
    return np.stack([red.ravel(), green.ravel(), blue.ravel()], axis=-1)


@dataclass(frozen=True)
class GridColourModel:
    """Paper and grid colours with the lookup tables built from them.

    Attributes
    ----------
    paper_rgb, grid_rgb : ndarray, shape (3,)
        Paper and grid colour, sRGB code values (0-255).
    tolerance : float
        Largest CIE76 distance from the paper-to-grid colour line that counts as grid ink.
    score_table : ndarray of uint8, shape (32768,)
        Grid score (0-255) of each quantised colour.
    ink_table : ndarray of bool, shape (32768,)
        Colours on the paper-to-grid line (paper or grid ink, not a pen or a stain of another colour).
    """

    paper_rgb: FloatArray
    grid_rgb: FloatArray
    tolerance: float
    score_table: ByteArray
    ink_table: NDArray[np.bool_]


def estimate_paper_rgb(image: ByteArray) -> FloatArray:
    """Paper colour (sRGB, 0-255): the per-channel median of a sparse sample of the sheet."""
    step = max(1, int(np.sqrt(image.shape[0] * image.shape[1] / 250_000)))
    sample = image[step // 2 :: step, step // 2 :: step].reshape(-1, 3)
    return np.asarray(np.median(sample, axis=0), dtype=np.float64)


def _ramp(t: FloatArray) -> FloatArray:
    rising = np.clip(t, 0.0, 1.0)
    falling = np.clip((RAMP_ZERO - t) / (RAMP_ZERO - RAMP_FLAT_END), 0.0, 1.0)
    return np.minimum(rising, falling)


def build_grid_colour_model(
    *, paper_rgb: FloatArray, grid_rgb: FloatArray, tolerance: float, pen_rgbs: tuple[FloatArray, ...] = ()
) -> GridColourModel:
    """Tables of the paper-to-grid colour model (module docstring).

    Parameters
    ----------
    paper_rgb, grid_rgb : ndarray, shape (3,)
        Paper and grid colours, sRGB code values (0-255).
    tolerance : float
        Largest CIE76 distance from the colour line that counts as grid ink.
    pen_rgbs : tuple of ndarray
        Expected pen colours (0-255): colours nearer one of them than the grid colour score 0.

    Raises
    ------
    ScienceInputError
        If the grid colour is within 5 CIELAB units of the paper colour.
    """
    paper_lab, grid_lab = srgb_to_lab(paper_rgb / 255.0), srgb_to_lab(grid_rgb / 255.0)
    direction = grid_lab - paper_lab
    length_sq = float(direction @ direction)
    if length_sq < MIN_GRID_CONTRAST**2:
        raise ScienceInputError(
            f"grid_colour: the grid colour differs from the paper (sRGB {np.round(paper_rgb).astype(int).tolist()}) "
            f"by only {np.sqrt(length_sq):.1f} CIELAB units; the grid cannot be told from the paper"
        )
    lab = srgb_to_lab(_table_colours() / 255.0)
    offset = lab - paper_lab
    t = offset @ direction / length_sq
    distance = np.sqrt(np.sum((offset - t[:, None] * direction) ** 2, axis=1))
    score = _ramp(t) * np.clip(1.0 - distance / tolerance, 0.0, 1.0)
    ink = (distance < tolerance) & (t < RAMP_ZERO)
    for pen in pen_rgbs:
        nearer_pen = delta_e_cie76(lab, srgb_to_lab(pen / 255.0)) < delta_e_cie76(lab, grid_lab)
        score[nearer_pen & (t > 0.25)] = 0.0
        ink &= ~(nearer_pen & (t > 0.25))
    table = np.ceil(score * 255.0).astype(np.uint8)
    return GridColourModel(paper_rgb.astype(np.float64), grid_rgb.astype(np.float64), tolerance, table, ink)


def grid_colour_model_for(
    image: ByteArray, *, grid_colour: str, tolerance: float, pen_colours: tuple[str, ...] = ()
) -> GridColourModel:
    """Colour model of a sheet: its paper colour, the spec's grid colour adapted to the scan.

    The printed ink on a scan rarely matches the nominal colour: the grid colour is re-estimated as the
    median of the most strongly covered grid pixels of a sparse sample (pixels near a pen colour left
    out), and the model rebuilt from it.
    """
    paper = estimate_paper_rgb(image)
    nominal = _hex_rgb(grid_colour)
    pens = tuple(_hex_rgb(colour) for colour in pen_colours)
    model = build_grid_colour_model(paper_rgb=paper, grid_rgb=nominal, tolerance=tolerance, pen_rgbs=pens)
    step = max(1, int(np.sqrt(image.shape[0] * image.shape[1] / 1_000_000)))
    sample = image[::step, ::step].reshape(-1, 3)
    scores = model.score_table[_colour_bins(sample)]
    strong = sample[scores >= 200]
    if strong.shape[0] < 50:
        return model
    coverage = grid_coverage(strong, model)
    best = strong[coverage >= np.quantile(coverage, 2.0 / 3.0)]
    observed = np.median(best, axis=0).astype(np.float64)
    return build_grid_colour_model(paper_rgb=paper, grid_rgb=observed, tolerance=tolerance, pen_rgbs=pens)


def _hex_rgb(colour: str) -> FloatArray:
    """sRGB code values (0-255) of a ``"#rrggbb"`` colour."""
    return parse_hex_colour(colour).astype(np.float64)


def grid_coverage(pixels: ByteArray, model: GridColourModel) -> NDArray[np.float32]:
    """Fraction of grid ink in each pixel (..., 3) -> (...): the sRGB projection, 0 for foreign colours.

    Linear in the code values, so the mixed pixels at a line's edges weigh in proportion to how much
    of the line they hold; clipped to [0, 1.5].
    """
    direction = (model.grid_rgb - model.paper_rgb).astype(np.float32)
    weights = direction / np.float32(direction @ direction)
    offset = pixels.astype(np.float32) - model.paper_rgb.astype(np.float32)
    t = offset @ weights
    np.clip(t, 0.0, 1.5, out=t)
    t *= model.ink_table[_colour_bins(pixels)]
    return t


@dataclass(frozen=True)
class FamilyMap:
    """Coarse grid scores for one line family (uint8 0-255) and the pixel positions of its cells.

    Attributes
    ----------
    family : str
        ``"vertical"`` (lines of near-constant u) or ``"horizontal"``.
    scores : ndarray of uint8, shape (rows, cols)
        Block maximum of the score across the lines, at sampled positions along them.
    u_centres, v_centres : ndarray
        Pixel coordinates (px) of the cells' columns and rows.
    """

    family: str
    scores: ByteArray
    u_centres: FloatArray
    v_centres: FloatArray


def _worker_count() -> int:
    # numpy releases the GIL in its loops, so two threads use both cores of a small server.
    return max(1, min(4, os.cpu_count() or 1))


def _vertical_map(image: ByteArray, model: GridColourModel, block: int) -> FamilyMap:
    step = 2 * block
    rows = np.arange(step // 2, image.shape[0], step)
    width = image.shape[1] - image.shape[1] % block
    out = np.zeros((rows.size, width // block), dtype=np.uint8)

    def run(first: int) -> None:
        chosen = image[rows[first : first + CHUNK_LINES], :width]
        scores = model.score_table[_colour_bins(chosen)]
        out[first : first + CHUNK_LINES] = block_maximum(scores, 1, block)

    with ThreadPoolExecutor(_worker_count()) as pool:
        list(pool.map(run, range(0, rows.size, CHUNK_LINES)))
    u = np.arange(out.shape[1]) * block + block / 2.0
    return FamilyMap("vertical", out, u.astype(np.float64), (rows + 0.5).astype(np.float64))


def _horizontal_map(image: ByteArray, model: GridColourModel, block: int) -> FamilyMap:
    step = 2 * block
    cols = np.arange(step // 2, image.shape[1], step)
    height = image.shape[0] - image.shape[0] % block
    out = np.zeros((height // block, cols.size), dtype=np.uint8)
    chunk = block * CHUNK_LINES

    def run(first: int) -> None:
        chosen = image[first : min(first + chunk, height), step // 2 :: step]
        scores = model.score_table[_colour_bins(chosen)]
        out[first // block : first // block + scores.shape[0] // block] = block_maximum(scores, block, 1)

    with ThreadPoolExecutor(_worker_count()) as pool:
        list(pool.map(run, range(0, height, chunk)))
    v = np.arange(out.shape[0]) * block + block / 2.0
    return FamilyMap("horizontal", out, (cols + 0.5).astype(np.float64), v.astype(np.float64))


def family_score_maps(image: ByteArray, model: GridColourModel, *, block: int) -> tuple[FamilyMap, FamilyMap]:
    """Coarse score maps of the near-vertical and the near-horizontal grid lines.

    Parameters
    ----------
    image : ndarray of uint8, shape (H, W, 3)
        The sheet, sRGB.
    model : GridColourModel
        Colour model of the sheet.
    block : int
        Cell size across the lines (px); rows (columns) are read every ``2 * block`` px along them.
    """
    return _vertical_map(image, model, block), _horizontal_map(image, model, block)
