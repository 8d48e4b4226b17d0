"""Deep-zoom tile pyramid (DZI) and thumbnail of a normalised sheet, written by libvips.

The pyramid is ``<basename>.dzi`` plus ``<basename>_files/<level>/<column>_<row>.jpg``: 254 px JPEG tiles with a
1 px overlap (so 256 px on the wire), quality 85, levels down to 1 x 1 px. The deepest level is the sheet at full
size with tile (c, r) covering sheet pixels [254 c - 1, 254 (c + 1) + 1) x [254 r - 1, 254 (r + 1) + 1) clipped
to the sheet; the viewer's image coordinates therefore share our origin (top-left corner of the top-left pixel,
u right, v down). Each level above halves the previous one by averaging 2 x 2 blocks, so level pixel (i, j)
covers sheet [2i, 2i + 2) x [2j, 2j + 2): no half-pixel shift between levels.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from tracedesk.imaging.normalise import NormalisedSheet

TILE_SIZE = 254
TILE_OVERLAP = 1
TILE_QUALITY = 85
THUMBNAIL_WIDTH = 320
THUMBNAIL_MAX_HEIGHT = 1280
# dzsave writes image metadata next to the tiles; the viewer never reads it and it should not be served.
_PROPERTIES_FILE = "vips-properties.xml"


@dataclass(frozen=True, slots=True)
class PyramidFiles:
    """Where a pyramid was written.

    Attributes
    ----------
    dzi_path
        The ``.dzi`` descriptor the viewer opens.
    tiles_dir
        The ``<basename>_files`` folder holding one sub-folder per level.
    levels
        Number of levels; the deepest (full size) is ``levels - 1``.
    """

    dzi_path: Path
    tiles_dir: Path
    levels: int


def save_pyramid(
    sheet: NormalisedSheet,
    folder: Path,
    *,
    basename: str = "pyramid",
    tile_size: int = TILE_SIZE,
    overlap: int = TILE_OVERLAP,
    quality: int = TILE_QUALITY,
) -> PyramidFiles:
    """Write the sheet's DZI tile pyramid into `folder` (which must exist and not already hold `basename`).

    Parameters
    ----------
    sheet
        The normalised sheet.
    folder
        Destination folder.
    basename
        Name of the ``.dzi`` file and prefix of the tiles folder.
    tile_size, overlap
        Tile edge and overlap in pixels.
    quality
        JPEG quality of the tiles (1-100).
    """
    sheet.image.dzsave(
        str(folder / basename),
        layout="dz",
        tile_size=tile_size,
        overlap=overlap,
        suffix=f".jpg[Q={quality},keep=none]",
        keep="none",
    )
    tiles_dir = folder / f"{basename}_files"
    (tiles_dir / _PROPERTIES_FILE).unlink(missing_ok=True)
    levels = sum(1 for entry in tiles_dir.iterdir() if entry.is_dir())
    return PyramidFiles(dzi_path=folder / f"{basename}.dzi", tiles_dir=tiles_dir, levels=levels)


def save_thumbnail(
    sheet: NormalisedSheet,
    path: Path,
    *,
    width: int = THUMBNAIL_WIDTH,
    max_height: int = THUMBNAIL_MAX_HEIGHT,
    quality: int = TILE_QUALITY,
) -> tuple[int, int]:
    """Write a JPEG thumbnail `width` px wide (never enlarged; at most `max_height` px tall).

    Returns
    -------
    tuple of int
        The thumbnail's width and height in pixels.
    """
    thumbnail = sheet.image.thumbnail_image(width, height=max_height, size="down")
    thumbnail.jpegsave(str(path), Q=quality, keep="none")
    return int(thumbnail.width), int(thumbnail.height)
