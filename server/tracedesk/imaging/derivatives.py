"""The derived files of one sheet, written together into one folder with fixed names.

Layout of the folder (the storage layer publishes it atomically as ``derived/<name>/``)::

    normalised.tif        8-bit RGB, orientation applied (see tracedesk.imaging.normalise)
    thumbnail.jpg         320 px wide
    pyramid.dzi           deep-zoom descriptor for the viewer
    pyramid_files/        tiles, one folder per level
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Literal

from tracedesk.imaging.normalise import NormalisedSheet, save_normalised
from tracedesk.imaging.pyramid import save_pyramid, save_thumbnail

NORMALISED_NAME = "normalised.tif"
THUMBNAIL_NAME = "thumbnail.jpg"
PYRAMID_BASENAME = "pyramid"
DZI_NAME = f"{PYRAMID_BASENAME}.dzi"
TILES_DIR_NAME = f"{PYRAMID_BASENAME}_files"


@dataclass(frozen=True, slots=True)
class SheetFiles:
    """What `write_sheet_files` wrote and what the database row needs to know about the sheet.

    Attributes
    ----------
    width, height
        Sheet size in pixels (after orientation).
    dpi
        Horizontal and vertical resolution in dots per inch, or None if unknown.
    pyramid_levels
        Number of pyramid levels.
    thumbnail_size
        Thumbnail width and height in pixels.
    """

    width: int
    height: int
    dpi: tuple[float, float] | None
    pyramid_levels: int
    thumbnail_size: tuple[int, int]


def write_sheet_files(
    sheet: NormalisedSheet, folder: Path, *, compression: Literal["none", "deflate"] = "none"
) -> SheetFiles:
    """Write the normalised image, the pyramid and the thumbnail of `sheet` into the existing `folder`."""
    save_normalised(sheet, folder / NORMALISED_NAME, compression=compression)
    pyramid = save_pyramid(sheet, folder, basename=PYRAMID_BASENAME)
    thumbnail_size = save_thumbnail(sheet, folder / THUMBNAIL_NAME)
    return SheetFiles(
        width=sheet.width,
        height=sheet.height,
        dpi=sheet.dpi,
        pyramid_levels=pyramid.levels,
        thumbnail_size=thumbnail_size,
    )
