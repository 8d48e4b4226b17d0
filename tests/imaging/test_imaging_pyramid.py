"""Deep-zoom pyramid and thumbnail: layout, tile geometry and the pixel origin shared with the viewer.

References (from memory, Microsoft Deep Zoom file format documentation): level n of an image of longest side D
is D / 2^(L - 1 - n) rounded up, with L = ceil(log2 D) + 1 levels, level 0 being 1 x 1; tile (c, r) of a level
starts at pixel (c T - overlap, r T - overlap) for c, r > 0 and carries `overlap` extra pixels on each inner
edge. The tile of column c therefore covers level pixels [c T - o, (c + 1) T + o) clipped to the image.
"""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
from imaging_samples import save_image
from numpy.testing import assert_allclose
from PIL import Image

from tracedesk.imaging import (
    DZI_NAME,
    NORMALISED_NAME,
    THUMBNAIL_NAME,
    TILES_DIR_NAME,
    examine_upload,
    iter_sheets,
    write_sheet_files,
)

WIDTH, HEIGHT = 600, 400
TILE, OVERLAP = 254, 1
DZI_NAMESPACE = "{http://schemas.microsoft.com/deepzoom/2008}"
# A dark 10 x 10 square on white covering sheet pixels [300, 310) x [20, 30): its centre is (305.0, 25.0).
MARK_LEFT, MARK_TOP, MARK_SIZE = 300, 20, 10


@pytest.fixture(scope="module")
def written(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, object]:
    folder = tmp_path_factory.mktemp("sheet")
    pixels = np.full((HEIGHT, WIDTH, 3), 255, np.uint8)
    pixels[MARK_TOP : MARK_TOP + MARK_SIZE, MARK_LEFT : MARK_LEFT + MARK_SIZE] = 0
    source = save_image(folder / "source.png", pixels, dpi=(300, 300))
    (sheet,) = list(iter_sheets(examine_upload(source)))
    output = folder / "derived"
    output.mkdir()
    return output, write_sheet_files(sheet, output)


def _dark_centroid(tile_path: Path) -> tuple[float, float]:
    with Image.open(tile_path) as tile:
        darkness = 255.0 - np.asarray(tile.convert("L"), dtype=float)
    darkness[darkness < 40] = 0  # ignore JPEG ringing on the paper
    rows, columns = np.indices(darkness.shape)
    total = darkness.sum()
    # Centre of pixel (i, j) is (i + 0.5, j + 0.5): the same convention as the sheet coordinates.
    return float((darkness * (columns + 0.5)).sum() / total), float((darkness * (rows + 0.5)).sum() / total)


def test_sheet_folder_layout(written: tuple[Path, object]) -> None:
    folder, files = written
    names = sorted(entry.name for entry in folder.iterdir())
    assert names == sorted([DZI_NAME, TILES_DIR_NAME, NORMALISED_NAME, THUMBNAIL_NAME])
    assert not (folder / TILES_DIR_NAME / "vips-properties.xml").exists()
    assert files.width == WIDTH and files.height == HEIGHT  # type: ignore[attr-defined]


def test_dzi_descriptor(written: tuple[Path, object]) -> None:
    folder, files = written
    root = ET.parse(folder / DZI_NAME).getroot()
    assert root.tag == f"{DZI_NAMESPACE}Image"
    assert (root.get("TileSize"), root.get("Overlap"), root.get("Format")) == ("254", "1", "jpg")
    size = root.find(f"{DZI_NAMESPACE}Size")
    assert size is not None
    assert (size.get("Width"), size.get("Height")) == (str(WIDTH), str(HEIGHT))
    assert files.pyramid_levels == math.ceil(math.log2(WIDTH)) + 1  # type: ignore[attr-defined]


def test_full_size_level_tile_sizes(written: tuple[Path, object]) -> None:
    folder, _files = written
    deepest = folder / TILES_DIR_NAME / str(math.ceil(math.log2(WIDTH)))
    expected = {  # (column, row) -> width, height with the 1 px overlap on inner edges only
        (0, 0): (255, 255),
        (1, 0): (256, 255),
        (2, 0): (WIDTH - 2 * TILE + 1, 255),
        (0, 1): (255, HEIGHT - TILE + 1),
        (2, 1): (WIDTH - 2 * TILE + 1, HEIGHT - TILE + 1),
    }
    assert len(list(deepest.glob("*.jpg"))) == 6
    for (column, row), size in expected.items():
        with Image.open(deepest / f"{column}_{row}.jpg") as tile:
            assert tile.size == size


def test_tiles_share_the_sheet_pixel_origin(written: tuple[Path, object]) -> None:
    """A half-pixel slip between sheet and viewer coordinates would move the mark's centre by 0.5 px."""
    folder, _files = written
    top_level = math.ceil(math.log2(WIDTH))
    column_origin = 1 * TILE - OVERLAP  # tile column 1 starts at sheet x = 253
    u, v = _dark_centroid(folder / TILES_DIR_NAME / str(top_level) / "1_0.jpg")
    assert_allclose([u + column_origin, v], [305.0, 25.0], atol=0.1)
    # One level up every pixel covers a 2 x 2 block of the sheet: the centre halves, with no shift.
    # At 300 x 200 px the mark (now at x 150-155) lies in tile column 0, whose origin is 0.
    u_half, v_half = _dark_centroid(folder / TILES_DIR_NAME / str(top_level - 1) / "0_0.jpg")
    assert_allclose([u_half, v_half], [305.0 / 2, 25.0 / 2], atol=0.1)


def test_thumbnail_is_320_wide_and_keeps_the_aspect(written: tuple[Path, object]) -> None:
    folder, files = written
    with Image.open(folder / THUMBNAIL_NAME) as thumbnail:
        assert thumbnail.format == "JPEG"
        assert thumbnail.width == 320
        assert abs(thumbnail.height - HEIGHT * 320 / WIDTH) <= 1
        assert files.thumbnail_size == thumbnail.size  # type: ignore[attr-defined]
