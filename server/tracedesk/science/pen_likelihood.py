"""How much each pixel looks like the pen: a soft score from the CIEDE2000 difference to the pen colour.

score = 1 - dE00 / tolerance, clipped to [0, 1]: 1 for the exact pen colour, 0 at or beyond the tolerance.

For whole sheets the score is read from a lookup table over sRGB quantised to 5 bits per channel
(32768 entries), so the CIELAB conversion and CIEDE2000 run once per table entry, not once per pixel
(a 7000 x 5000 sheet has 35 million pixels). Quantising moves a colour by at most half a bin (4 code
values a channel), which changes dE00 by about 1 (99 % of colours: under 4): small against tolerances
of 10-30. The fine stages use the same table, so "no pen here" means the same thing at every stage;
sub-pixel positions come from the colours themselves (``subpixel``), not from the quantised score.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.colour import delta_e_ciede2000, srgb_to_lab
from tracedesk.science.errors import ScienceInputError

FloatArray = NDArray[np.float64]
ByteArray = NDArray[np.uint8]
# (first row, row count, column start, column stop, column step) -> (row count, columns) bool, or None.
ChunkMask = Callable[[int, int, int, int, int], NDArray[np.bool_] | None]
ProgressCallback = Callable[[float], None]

QUANTISATION_BITS = 5
# Above this share of blocks passing the one-channel gate, scoring every pixel is cheaper than picking.
GATE_MAX_FRACTION = 0.3
MAX_TOLERANCE = 100.0


@dataclass(frozen=True)
class PenColourModel:
    """The pen colour, the tolerance, and lookup tables over 5-bit-per-channel sRGB.

    Attributes
    ----------
    pen_lab : numpy.ndarray, shape (3,)
        Pen colour in CIELAB (D65).
    tolerance : float
        Largest CIEDE2000 difference at which a pixel still counts as pen.
    score_table : numpy.ndarray of uint8, shape (32768,)
        Score (0-255) of each quantised colour; any colour closer than the tolerance scores >= 1.
    difference_table : numpy.ndarray of float32, shape (32768,)
        CIEDE2000 difference of each quantised colour (bin centre) to the pen colour.
    gate_channel : int
        The sRGB channel (0, 1, 2) that alone rules out the most code values.
    gate_table : numpy.ndarray of uint8, shape (256,)
        1 for the code values of that channel that some colour within the tolerance has, else 0: a
        one-lookup test that no pixel outside it can be pen.
    """

    pen_lab: FloatArray
    tolerance: float
    score_table: ByteArray
    difference_table: NDArray[np.float32]
    gate_channel: int
    gate_table: ByteArray


def validate_tolerance(tolerance: float) -> float:
    """Check a CIEDE2000 tolerance: finite, > 0 and <= 100."""
    value = float(tolerance)
    if not np.isfinite(value) or value <= 0.0 or value > MAX_TOLERANCE:
        raise ScienceInputError(
            f"colour tolerance must be a CIEDE2000 difference in (0, {MAX_TOLERANCE:g}], got {tolerance!r}"
        )
    return value


def pen_score(delta_e: FloatArray, *, tolerance: float) -> FloatArray:
    """Pen score in [0, 1] from CIEDE2000 differences: 1 - dE / tolerance, clipped."""
    return np.clip(1.0 - np.asarray(delta_e, dtype=np.float64) / tolerance, 0.0, 1.0)


def build_pen_colour_model(pen_lab: FloatArray, *, tolerance: float) -> PenColourModel:
    """Precompute the score and difference tables for one pen colour.

    Parameters
    ----------
    pen_lab : numpy.ndarray, shape (3,)
        Pen colour, CIELAB (D65).
    tolerance : float
        Largest CIEDE2000 difference that still counts as pen (CIELAB-like units).
    """
    tolerance = validate_tolerance(tolerance)
    levels = 1 << QUANTISATION_BITS
    step = 256 // levels
    centres = np.arange(levels) * step + (step - 1) / 2.0
    red, green, blue = np.meshgrid(centres, centres, centres, indexing="ij")
    table_rgb = np.stack([red.ravel(), green.ravel(), blue.ravel()], axis=-1) / 255.0
    difference = delta_e_ciede2000(srgb_to_lab(table_rgb), pen_lab)
    # Ceil so that every colour inside the tolerance keeps a non-zero byte score.
    score = np.ceil(pen_score(difference, tolerance=tolerance) * 255.0).astype(np.uint8)
    gate_channel, gate_table = _channel_gate(score)
    return PenColourModel(
        np.asarray(pen_lab, np.float64), tolerance, score, difference.astype(np.float32), gate_channel, gate_table
    )


def _channel_gate(score: ByteArray) -> tuple[int, ByteArray]:
    """The channel whose possible pen values are fewest, and a 256-entry 0/1 table of those values."""
    levels = 1 << QUANTISATION_BITS
    possible = score.reshape(levels, levels, levels) > 0
    per_channel = [np.asarray(possible.any(axis=tuple(a for a in range(3) if a != k)), bool) for k in range(3)]
    channel = int(np.argmin([flags.sum() for flags in per_channel]))
    code_values = np.arange(256) >> (8 - QUANTISATION_BITS)
    return channel, per_channel[channel][code_values].astype(np.uint8)


def quantised_colour_index(pixels: ByteArray) -> NDArray[np.uint16]:
    """Index into the 5-bit tables: (r >> 3) << 10 | (g >> 3) << 5 | (b >> 3), in uint16."""
    index: NDArray[np.uint16] = (pixels[..., 0] & 0xF8).astype(np.uint16)
    index <<= 7
    index |= (pixels[..., 1] & 0xF8).astype(np.uint16) << 2
    index |= pixels[..., 2] >> 3
    return index


def _row_chunks(row_start: int, row_stop: int, chunk_rows: int) -> Iterator[tuple[int, int]]:
    for first in range(row_start, row_stop, chunk_rows):
        yield first, min(chunk_rows, row_stop - first)


def _worker_count() -> int:
    # numpy releases the GIL inside its loops, so two threads use both cores of a small server.
    return max(1, min(4, os.cpu_count() or 1))


@dataclass(frozen=True)
class CoarseGrid:
    """Geometry of the coarse score map: cells of ``block`` x ``block`` pixels over pixel rows
    [row_start, row_stop) and columns [col_start, col_stop) (the last cells may be partly empty; empty
    parts score 0). Only every ``column_step``-th pixel column is read: a pen line is at least a pixel
    wide across its direction, so halving the columns read loses nothing but the ends of very steep
    one-pixel strokes, which the coarse path bridges anyway.
    """

    row_start: int
    row_stop: int
    col_start: int
    col_stop: int
    block: int
    column_step: int

    @property
    def n_rows(self) -> int:
        """Number of coarse rows."""
        return -(-(self.row_stop - self.row_start) // self.block)

    @property
    def n_cols(self) -> int:
        """Number of coarse columns."""
        return -(-(self.col_stop - self.col_start) // self.block)


def coarse_score_map(
    image: ByteArray,
    grid: CoarseGrid,
    model: PenColourModel,
    *,
    mask: ChunkMask | None = None,
    progress: ProgressCallback | None = None,
) -> ByteArray:
    """Block maximum of the pen score over the coarse grid (uint8 0-255, shape (n_rows, n_cols)).

    Works in row chunks on two threads; peak extra memory is a few chunks, not a sheet-sized array.
    """
    out = np.zeros((grid.n_rows, grid.n_cols), dtype=np.uint8)
    chunk_rows = grid.block * max(1, 64 // grid.block)
    chunks = list(_row_chunks(grid.row_start, grid.row_stop, chunk_rows))

    def run(chunk: tuple[int, int]) -> None:
        _score_chunk(image, grid, model, mask, chunk, out)

    with ThreadPoolExecutor(_worker_count()) as pool:
        for done, _ in enumerate(pool.map(run, chunks), start=1):
            if progress is not None:
                progress(done / len(chunks))
    return out


def _score_chunk(
    image: ByteArray,
    grid: CoarseGrid,
    model: PenColourModel,
    mask: ChunkMask | None,
    chunk: tuple[int, int],
    out: ByteArray,
) -> None:
    first, count = chunk
    pixels = image[first : first + count, grid.col_start : grid.col_stop : grid.column_step]
    block_cols = grid.block // grid.column_step
    out_row = (first - grid.row_start) // grid.block
    if mask is None and count % grid.block == 0:
        blocks = _gated_block_scores(pixels, model, grid.block, block_cols)
    else:
        scores = np.take(model.score_table, quantised_colour_index(pixels))
        inside = mask(first, count, grid.col_start, grid.col_stop, grid.column_step) if mask is not None else None
        if inside is not None:
            scores *= inside
        blocks = block_maximum(scores, grid.block, block_cols)
    out[out_row : out_row + blocks.shape[0], : blocks.shape[1]] = blocks


def _gated_block_scores(pixels: ByteArray, model: PenColourModel, block_rows: int, block_cols: int) -> ByteArray:
    """Block maxima of the score, looking up full colours only in blocks that pass the one-channel gate.

    Most of a sheet is paper and grid that one channel already rules out, so the three-channel index
    (the costly part) is built for a few blocks instead of every pixel.
    """
    gate = block_maximum(np.take(model.gate_table, pixels[..., model.gate_channel]), block_rows, block_cols)
    block_row, block_col = np.nonzero(gate)
    if block_row.size > GATE_MAX_FRACTION * gate.size:
        return block_maximum(np.take(model.score_table, quantised_colour_index(pixels)), block_rows, block_cols)
    result = np.zeros_like(gate)
    whole = (pixels.shape[1] // block_cols) * block_cols
    in_whole = block_col * block_cols < whole
    blocks = pixels[:, :whole].reshape(gate.shape[0], block_rows, whole // block_cols, block_cols, 3)
    # Advanced indices split by a slice put the block axis first: shape (n, block_rows, block_cols, 3).
    picked = blocks[block_row[in_whole], :, block_col[in_whole]]
    scores = np.take(model.score_table, quantised_colour_index(picked))
    if len(scores):
        result[block_row[in_whole], block_col[in_whole]] = scores.reshape(len(scores), -1).max(axis=1)
    if whole < pixels.shape[1]:
        tail = np.take(model.score_table, quantised_colour_index(pixels[:, whole:]))
        result[:, -1] = block_maximum(tail, block_rows, block_cols)[:, 0]
    return result


def block_maximum(values: ByteArray, block_rows: int, block_cols: int) -> ByteArray:
    """Maximum over blocks of ``block_rows`` x ``block_cols`` (edges padded with 0).

    Reduces rows with one contiguous reduction and columns with a few strided maxima: numpy's
    max over axes (1, 3) of a 4-d view is about forty times slower here.
    """
    rows, cols = values.shape
    pad_rows, pad_cols = -rows % block_rows, -cols % block_cols
    if pad_rows or pad_cols:
        values = np.pad(values, ((0, pad_rows), (0, pad_cols)))
    by_rows = np.maximum.reduce(values.reshape(-1, block_rows, values.shape[1]), axis=1)
    by_cells = by_rows.reshape(by_rows.shape[0], -1, block_cols)
    result = np.array(by_cells[:, :, 0])
    for offset in range(1, block_cols):
        np.maximum(result, by_cells[:, :, offset], out=result)
    return result


def nearest_colour_difference(
    image: ByteArray,
    grid: CoarseGrid,
    model: PenColourModel,
    *,
    mask: ChunkMask | None = None,
) -> float:
    """Smallest CIEDE2000 difference to the pen colour among the region's pixels (5-bit quantised).

    Used only to explain a refusal, so it is a plain single-threaded pass.
    """
    best = np.inf
    for first, count in _row_chunks(grid.row_start, grid.row_stop, 64):
        pixels = image[first : first + count, grid.col_start : grid.col_stop]
        difference = model.difference_table[quantised_colour_index(pixels)]
        inside = mask(first, count, grid.col_start, grid.col_stop, 1) if mask is not None else None
        if inside is not None:
            difference = difference[inside]
        if difference.size:
            best = min(best, float(difference.min()))
    return best


def table_pen_score(rgb: NDArray[np.uint8] | FloatArray, model: PenColourModel) -> FloatArray:
    """Score in [0, 1] of (n, 3) sRGB samples (uint8, or floats on the 0-255 scale) from the 5-bit table.

    The same test as the coarse pass, so a column is a gap exactly when the coarse pass would see no pen.
    """
    if rgb.dtype == np.uint8:
        pixels = np.asarray(rgb, dtype=np.uint8)
    else:
        pixels = np.clip(np.asarray(rgb, dtype=np.float64) + 0.5, 0.0, 255.0).astype(np.uint8)
    return np.take(model.score_table, quantised_colour_index(pixels)) / 255.0
