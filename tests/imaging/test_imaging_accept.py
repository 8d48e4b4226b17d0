"""Accepted uploads become the right sheets: every TIFF frame, every PDF page, sizes and resolution kept.

Reference values: pixel content written by Pillow (a general-purpose library) and read back; PDF page size in
pixels = ceil(points x dpi / 72), 72 points per inch (ISO 32000-1, 8.3.2.3 "user space" default unit, from memory).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from imaging_samples import rgb_test_pattern, save_image, save_pdf_pages
from numpy.testing import assert_allclose, assert_array_equal
from PIL import Image

from tracedesk.imaging import ImageFormat, examine_upload, iter_sheets


def test_png_is_one_sheet_with_exact_pixels_and_dpi(tmp_path: Path) -> None:
    pixels = rgb_test_pattern(64, 48)
    path = save_image(tmp_path / "scan.png", pixels, dpi=(600, 600))
    info = examine_upload(path, declared_name="scan.png", declared_media_type="image/png")
    assert (info.image_format, info.page_count, info.media_type) == (ImageFormat.PNG, 1, "image/png")
    # PNG stores pixels per metre as an integer (23622 for 600 dpi): the snap restores exactly 600.
    assert info.pages[0].dpi == (600.0, 600.0)
    (sheet,) = list(iter_sheets(info))
    assert (sheet.width, sheet.height) == (64, 48)
    assert_array_equal(sheet.image.numpy(), pixels)


def test_jpeg_is_decoded_close_to_pillow(tmp_path: Path) -> None:
    pixels = np.zeros((40, 64, 3), np.uint8)
    pixels[:, :32] = (200, 30, 40)
    pixels[:, 32:] = (20, 160, 220)
    path = save_image(tmp_path / "scan.jpg", pixels, quality=95, dpi=(300, 300))
    info = examine_upload(path, declared_name="scan.jpg")
    (sheet,) = list(iter_sheets(info))
    with Image.open(path) as reference:
        expected = np.asarray(reference.convert("RGB"))
    # Two libjpeg builds may round the inverse DCT differently: allow a few levels.
    assert_allclose(sheet.image.numpy().astype(int), expected.astype(int), atol=3)
    assert sheet.dpi == (300.0, 300.0)


def test_jpeg_without_density_has_no_dpi(tmp_path: Path) -> None:
    path = save_image(tmp_path / "scan.jpg", rgb_test_pattern(16, 16))
    info = examine_upload(path)
    assert info.pages[0].dpi is None


def test_every_tiff_frame_becomes_a_sheet(tmp_path: Path) -> None:
    frames = [rgb_test_pattern(30 + 10 * i, 20 + 5 * i, seed=i) for i in range(3)]
    path = tmp_path / "roll.tif"
    first, *rest = (Image.fromarray(frame) for frame in frames)
    first.save(path, save_all=True, append_images=rest, compression="tiff_lzw", dpi=(400, 400))
    info = examine_upload(path, declared_name="roll.TIFF")
    assert [(page.width, page.height) for page in info.pages] == [(30, 20), (40, 25), (50, 30)]
    sheets = list(iter_sheets(info))
    assert [sheet.page_index for sheet in sheets] == [0, 1, 2]
    for sheet, frame in zip(sheets, frames, strict=True):
        assert_array_equal(sheet.image.numpy(), frame)
        assert sheet.dpi == (400.0, 400.0)


def test_pdf_pages_render_at_300_dpi_by_default(tmp_path: Path) -> None:
    # Pillow's PDF writer makes each page box = image size x 72 / resolution points: 200 x 100 px at 100
    # dpi -> 144 x 72 pt -> 600 x 300 px at 300 dpi.
    path = tmp_path / "two.pdf"
    white = Image.new("RGB", (200, 100), "white")
    white.save(path, save_all=True, append_images=[Image.new("RGB", (200, 100), (255, 0, 0))], resolution=100)
    info = examine_upload(path, declared_name="two.pdf", declared_media_type="application/pdf")
    assert info.page_count == 2
    assert [(page.width, page.height, page.dpi) for page in info.pages] == [(600, 300, (300.0, 300.0))] * 2
    first, second = list(iter_sheets(info))
    assert (second.width, second.height) == (600, 300)
    assert_allclose(first.image.numpy().mean(axis=(0, 1)), [255, 255, 255], atol=1)
    assert_allclose(second.image.numpy()[10:-10, 10:-10].mean(axis=(0, 1)), [255, 0, 0], atol=3)


@pytest.mark.parametrize(("dpi", "box_pt"), [(150.0, (144.5, 72.0)), (72.0, (612.0, 792.0))])
def test_pdf_pixel_size_follows_the_page_box(tmp_path: Path, dpi: float, box_pt: tuple[float, float]) -> None:
    path = save_pdf_pages(tmp_path / "page.pdf", [box_pt])
    info = examine_upload(path, pdf_dpi=dpi)
    expected = (math.ceil(box_pt[0] * dpi / 72), math.ceil(box_pt[1] * dpi / 72))
    assert (info.pages[0].width, info.pages[0].height) == expected
    (sheet,) = list(iter_sheets(info))
    assert (sheet.width, sheet.height) == expected
    assert info.pdf_dpi == dpi


def test_pdf_page_rotation_swaps_the_rendered_size(tmp_path: Path) -> None:
    path = save_pdf_pages(tmp_path / "rotated.pdf", [(200.0, 100.0)], rotation=90)
    info = examine_upload(path)
    assert (info.pages[0].width, info.pages[0].height) == (417, 834)  # ceil(100 x 300/72), ceil(200 x 300/72)
    (sheet,) = list(iter_sheets(info))
    assert (sheet.width, sheet.height) == (417, 834)


@pytest.mark.parametrize("bad_dpi", [0.0, 20.0, 5000.0, float("nan")])
def test_unreasonable_pdf_dpi_is_a_caller_error(tmp_path: Path, bad_dpi: float) -> None:
    path = save_pdf_pages(tmp_path / "page.pdf", [(100.0, 100.0)])
    with pytest.raises(ValueError, match="pdf_dpi"):
        examine_upload(path, pdf_dpi=bad_dpi)


def test_jpeg_resolution_is_never_invented(tmp_path: Path) -> None:
    """Pillow reports 72 dpi for any JPEG with EXIF but no resolution; a scan's dpi must come from the file."""
    no_resolution = Image.Exif()
    no_resolution[0x0112] = 1
    path = save_image(tmp_path / "camera.jpg", rgb_test_pattern(16, 16), exif=no_resolution.tobytes())
    assert examine_upload(path).pages[0].dpi is None


def test_jpeg_resolution_from_exif_when_jfif_has_none(tmp_path: Path) -> None:
    exif = Image.Exif()
    exif[282], exif[283], exif[296] = 400.0, 400.0, 2  # XResolution, YResolution, unit inch (EXIF 2.3)
    path = save_image(tmp_path / "scan.jpg", rgb_test_pattern(16, 16), exif=exif.tobytes())
    assert examine_upload(path).pages[0].dpi == (400.0, 400.0)


def test_jpeg_with_damaged_exif_is_read_as_stored(tmp_path: Path) -> None:
    damaged = b"Exif\x00\x00II*\x00\xff\xff\xff\x7fjunkjunk"  # IFD offset points far outside the block
    path = save_image(tmp_path / "odd.jpg", rgb_test_pattern(32, 16), exif=damaged)
    info = examine_upload(path)
    assert (info.pages[0].orientation, info.pages[0].dpi) == (1, None)
    (sheet,) = list(iter_sheets(info))
    assert (sheet.width, sheet.height) == (32, 16)
