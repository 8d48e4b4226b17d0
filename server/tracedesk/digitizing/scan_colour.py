"""The colour of the scan around a point: what the workbench's pen colour picker reads.

A click rarely lands on the centre of a 2-3 px pen line, so the picker does not return the clicked pixel alone: it
takes the paper colour as the median of a window around the click, and the ink colour as the mean of the pixels in
the small disc around the click that differ most from that paper (CIE76 difference in CIELAB).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pyvips
from numpy.typing import NDArray

from tracedesk.archive.files import NORMALISED_NAME
from tracedesk.digitizing.sheet_image import load_sheet_image
from tracedesk.science.colour import delta_e_cie76, srgb_to_lab
from tracedesk.storage import FileStore, LocalFileStore

# Below this CIE76 difference from the paper nothing in the disc counts as ink (a faint grid line is about 15-25).
INK_MIN_DIFFERENCE = 8.0
# Pixels within this fraction of the strongest difference form the ink core (anti-aliased edges are excluded).
INK_CORE_FRACTION = 0.7


@dataclass(frozen=True)
class ColourSample:
    """What the picker found at (u, v): the ink colour, the clicked pixel and the paper around it (``#rrggbb``)."""

    pen_color: str
    pixel_color: str
    paper_color: str
    ink_found: bool
    difference: float


@dataclass(frozen=True)
class Window:
    """A block of sheet pixels (rows, columns, 3) whose top-left pixel is (column0, row0)."""

    pixels: NDArray[np.uint8]
    column0: int
    row0: int


def read_window(store: FileStore, derived_key: str, *, box: tuple[int, int, int, int]) -> Window:
    """Pixels of the normalised sheet in ``box`` = (column0, row0, column1, row1), end exclusive, already clipped.

    A stored normalised image (PDF pages) is an uncompressed striped TIFF, so libvips reads only the strips under
    the box; raster sheets are decoded from their original (and kept in memory for the next pick).
    """
    column0, row0, column1, row1 = box
    normalised = store.derived_file_path(derived_key, NORMALISED_NAME) if isinstance(store, LocalFileStore) else None
    if normalised is not None and normalised.is_file():
        image = pyvips.Image.new_from_file(str(normalised), access="random")
        block = image.crop(column0, row0, column1 - column0, row1 - row0)
        pixels: NDArray[np.uint8] = np.asarray(block.numpy(), dtype=np.uint8).reshape(
            row1 - row0, column1 - column0, -1
        )
        return Window(pixels[:, :, :3], column0, row0)
    whole = load_sheet_image(store, derived_key)
    return Window(whole[row0:row1, column0:column1, :3], column0, row0)


def window_box(*, u: float, v: float, radius_px: float, width: int, height: int) -> tuple[int, int, int, int]:
    """The paper window around (u, v): three times the disc radius plus a margin, clipped to the sheet."""
    reach = math.ceil(3.0 * radius_px) + 4
    column, row = min(max(math.floor(u), 0), width - 1), min(max(math.floor(v), 0), height - 1)
    return max(column - reach, 0), max(row - reach, 0), min(column + reach + 1, width), min(row + reach + 1, height)


def _hex(rgb: NDArray[np.float64] | NDArray[np.uint8]) -> str:
    values = np.clip(np.rint(np.asarray(rgb, dtype=np.float64)), 0, 255).astype(int)
    return "#{:02x}{:02x}{:02x}".format(*values.tolist())


def ink_colour(window: Window, *, u: float, v: float, radius_px: float) -> ColourSample:
    """The ink, clicked-pixel and paper colours of a window, for a click at (u, v) px with a disc of ``radius_px``."""
    pixels = window.pixels.astype(np.float64)
    rows, columns = np.mgrid[0 : pixels.shape[0], 0 : pixels.shape[1]]
    # Pixel centres sit at (i + 0.5, j + 0.5): measure the disc from there.
    distance = np.hypot(columns + window.column0 + 0.5 - u, rows + window.row0 + 0.5 - v)
    in_disc = distance <= max(radius_px, 0.75)
    paper = np.median(pixels.reshape(-1, 3), axis=0)
    clicked = pixels.reshape(-1, 3)[int(np.argmin(distance))]
    disc = pixels[in_disc]
    difference = delta_e_cie76(srgb_to_lab(disc / 255.0), srgb_to_lab(paper / 255.0))
    strongest = float(np.max(difference)) if difference.size else 0.0
    if strongest < INK_MIN_DIFFERENCE:
        return ColourSample(_hex(clicked), _hex(clicked), _hex(paper), False, strongest)
    core = disc[difference >= INK_CORE_FRACTION * strongest]
    return ColourSample(_hex(core.mean(axis=0)), _hex(clicked), _hex(paper), True, strongest)
