"""Normalisation to 8-bit RGB: orientation, bit depth, palette, alpha, CMYK, and the stored TIFF round trip.

References: Pillow's `ImageOps.exif_transpose` (general-purpose library) for the eight EXIF orientations (EXIF 2.3,
tag 274, values 1-8); 16-bit to 8-bit by keeping the high byte (libvips' documented conversion, v >> 8);
alpha compositing over white: out = a c + (1 - a) 255 with a = alpha / 255 (Porter & Duff "over", 1984).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from imaging_samples import rgb_test_pattern, save_image
from numpy.testing import assert_allclose, assert_array_equal
from PIL import Image, ImageOps

from tracedesk.imaging import (
    NORMALISED_NAME,
    NormalisedSheet,
    UnsupportedImageVariant,
    examine_upload,
    iter_sheets,
    load_normalised,
    save_normalised,
    write_sheet_files,
)

EXIF_ORIENTATION = 0x0112


def _only_sheet(path: Path) -> NormalisedSheet:
    (sheet,) = list(iter_sheets(examine_upload(path)))
    return sheet


@pytest.mark.parametrize("orientation", range(1, 9))
@pytest.mark.parametrize("suffix", [".png", ".tif"])
def test_exif_orientation_matches_pillow(tmp_path: Path, orientation: int, suffix: str) -> None:
    pixels = rgb_test_pattern(5, 3, seed=orientation)
    image = Image.fromarray(pixels)
    exif = image.getexif()
    exif[EXIF_ORIENTATION] = orientation
    path = tmp_path / f"o{orientation}{suffix}"
    image.save(path, exif=exif.tobytes(), dpi=(300, 200))
    with Image.open(path) as reopened:
        expected = np.asarray(ImageOps.exif_transpose(reopened).convert("RGB"))
    sheet = _only_sheet(path)
    assert_array_equal(sheet.image.numpy(), expected)
    swapped = orientation >= 5
    assert sheet.dpi == ((200.0, 300.0) if swapped else (300.0, 200.0))


def test_jpeg_orientation_6_turns_the_image_clockwise(tmp_path: Path) -> None:
    pixels = np.full((40, 80, 3), 255, np.uint8)
    pixels[:8, :8] = 0  # dark block at the stored top-left
    exif = Image.Exif()
    exif[EXIF_ORIENTATION] = 6  # display = stored rotated 90 degrees clockwise
    path = save_image(tmp_path / "o6.jpg", pixels, exif=exif.tobytes(), quality=95)
    sheet = _only_sheet(path)
    upright = sheet.image.numpy()
    assert upright.shape == (80, 40, 3)
    # After a clockwise quarter turn the stored top-left corner sits at the top-right.
    assert upright[:8, -8:].mean() < 40
    assert upright[:8, :8].mean() > 215
    # The thumbnail must not rotate again: orientation metadata is dropped once applied.
    files = write_sheet_files(sheet, tmp_path)
    assert files.thumbnail_size == (40, 80)


def test_sixteen_bit_grey_keeps_the_high_byte(tmp_path: Path) -> None:
    values = np.arange(0, 65536, 257 * 3 + 1, dtype=np.uint16)[:64].reshape(8, 8)
    path = save_image(tmp_path / "grey16.png", values)
    with Image.open(path) as check:
        assert check.mode.startswith("I;16")  # really a 16-bit file
    normalised = _only_sheet(path).image.numpy()
    expected = (values >> 8).astype(np.uint8)
    for channel in range(3):
        assert_array_equal(normalised[:, :, channel], expected)


def test_palette_png_expands_to_its_colours(tmp_path: Path) -> None:
    pixels = rgb_test_pattern(12, 10, seed=3) // 64 * 64  # at most 64 colours: an exact palette
    image = Image.fromarray(pixels).quantize(colors=64, dither=Image.Dither.NONE)
    path = tmp_path / "palette.png"
    image.save(path)
    expected = np.asarray(image.convert("RGB"))
    assert_array_equal(_only_sheet(path).image.numpy(), expected)


@pytest.mark.parametrize("mode", ["RGBA", "LA"])
def test_alpha_is_flattened_on_white(tmp_path: Path, mode: str) -> None:
    rgba = np.zeros((2, 3, 4), np.uint8)
    rgba[..., :3] = (40, 90, 200)
    rgba[..., 3] = [[0, 128, 255], [255, 64, 0]]
    image = Image.fromarray(rgba, "RGBA").convert(mode)
    path = tmp_path / "alpha.png"
    image.save(path)
    colour = np.asarray(image.convert("RGBA"))[..., :3].astype(float)
    alpha = rgba[..., 3:4] / 255.0
    expected = alpha * colour + (1 - alpha) * 255
    assert_allclose(_only_sheet(path).image.numpy(), expected, atol=1.0)


def test_cmyk_jpeg_becomes_rgb_with_white_paper(tmp_path: Path) -> None:
    cmyk = np.zeros((16, 16, 4), np.uint8)  # no ink at all: paper white
    cmyk[8:, :, 3] = 255  # full black ink in the lower half
    path = tmp_path / "cmyk.jpg"
    Image.fromarray(cmyk, "CMYK").save(path, quality=95)
    normalised = _only_sheet(path).image.numpy()
    assert normalised.shape == (16, 16, 3)
    assert normalised[:6].min() > 240  # paper stays white (ICC conversion, not an inversion)
    assert normalised[10:].max() < 60  # full black ink is dark


def test_bilevel_tiff_becomes_black_and_white_rgb(tmp_path: Path) -> None:
    bits = np.zeros((8, 16), bool)
    bits[:, 8:] = True
    path = tmp_path / "fax.tif"
    Image.fromarray(bits).save(path, compression="group4")
    normalised = _only_sheet(path).image.numpy()
    assert_array_equal(normalised[:, :8], 0)
    assert_array_equal(normalised[:, 8:], 255)


def test_float_tiff_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "float.tif"
    Image.fromarray(np.ones((4, 4), np.float32)).save(path)
    info = examine_upload(path)
    with pytest.raises(UnsupportedImageVariant) as refused:
        list(iter_sheets(info))
    assert refused.value.http_status == 422


@pytest.mark.parametrize("compression", ["none", "deflate"])
def test_normalised_tiff_round_trips_pixels_and_dpi(tmp_path: Path, compression: str) -> None:
    pixels = rgb_test_pattern(70, 50, seed=9)
    sheet = _only_sheet(save_image(tmp_path / "in.png", pixels, dpi=(600, 600)))
    target = save_normalised(sheet, tmp_path / NORMALISED_NAME, compression=compression)  # type: ignore[arg-type]
    loaded = load_normalised(target)
    assert loaded.dtype == np.uint8
    assert loaded.flags.writeable
    assert_array_equal(loaded, pixels)
    with Image.open(target) as written:
        assert_allclose([float(value) for value in written.info["dpi"]], [600, 600], atol=0.01)
        assert written.info.get("exif") is None


def test_load_normalised_refuses_other_images(tmp_path: Path) -> None:
    path = tmp_path / "grey.tif"
    Image.new("L", (4, 4)).save(path)
    with pytest.raises(ValueError, match="not a normalised sheet image"):
        load_normalised(path)
