"""The hostile-upload corpus: every file refused with the right exception and status, in bounded memory.

Memory is measured two ways around each refusal: tracemalloc's peak (Python allocations) and the growth of the
process's peak resident set (VmHWM, reset through /proc/self/clear_refs; this also sees C allocations by
Pillow, libvips and PDFium). Decoding any of the claimed sizes would need gigabytes. PDFs whose cost the page
box does not show (a content stream that inflates to a gigabyte, one that fills the page ten thousand times)
are stopped by the decoder process's memory and time limits; this process's memory does not grow.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import pytest
from imaging_samples import (
    encrypted_pdf_bytes,
    inflating_pdf_bytes,
    measure_memory,
    png_chunk,
    png_claiming_size,
    rgb_test_pattern,
    save_image,
    save_pdf_pages,
    slow_pdf_bytes,
    tiff_with_frames,
)
from PIL import Image, ImageFile

from tracedesk.imaging import (
    CorruptUpload,
    DecodeLimits,
    DecodeMemoryLimit,
    DecodeTimeLimit,
    EncryptedDocument,
    FileTooLarge,
    TooManyPages,
    TooManyPixels,
    UnsupportedFileType,
    UploadRefused,
    examine_upload,
    iter_sheets,
)

PYTHON_PEAK_LIMIT = 4 * 2**20
RSS_GROWTH_LIMIT = 48 * 2**20


def _refusal(path: Path, **options: object) -> tuple[UploadRefused, int, int | None]:
    with measure_memory() as use, pytest.raises(UploadRefused) as refused:
        list(iter_sheets(examine_upload(path, **options)))  # type: ignore[arg-type]
    return refused.value, use.python_peak, use.rss_growth


def _assert_refused(path: Path, kind: type[UploadRefused], status: int, **options: object) -> UploadRefused:
    error, python_peak, rss_growth = _refusal(path, **options)
    assert isinstance(error, kind), error
    assert error.http_status == status
    assert error.reason  # a message for the user
    assert python_peak < PYTHON_PEAK_LIMIT
    if rss_growth is not None:
        assert rss_growth < RSS_GROWTH_LIMIT
    return error


def _write(tmp_path: Path, name: str, data: bytes) -> Path:
    path = tmp_path / name
    path.write_bytes(data)
    return path


SVG = b'<?xml version="1.0"?><svg xmlns="http://www.w3.org/2000/svg"><script>alert(1)</script></svg>'
EPS = b"%!PS-Adobe-3.0 EPSF-3.0\n%%BoundingBox: 0 0 10 10\nshowpage\n"
HTML = b"<!DOCTYPE html><html><body><img src=x onerror=alert(1)></body></html>"


@pytest.mark.parametrize(
    ("name", "data"),
    [
        ("wrong_magic.png", b"this is not an image at all, only text pretending" * 4),
        ("drawing.png", SVG),
        ("figure.png", EPS),
        ("figure.eps", EPS),
        ("page.png", HTML),
        ("page.html", HTML),
        ("anim.gif", b"GIF89a\x01\x00\x01\x00\x00\x00\x00;"),
        ("anim.png", b"GIF89a\x01\x00\x01\x00\x00\x00\x00;"),
        ("dos.eps", b"\xc5\xd0\xd3\xc6" + b"\x00" * 60),
    ],
)
def test_other_types_are_refused_with_415(tmp_path: Path, name: str, data: bytes) -> None:
    _assert_refused(_write(tmp_path, name, data), UnsupportedFileType, 415, declared_name=name)


def test_jpeg_named_png_is_refused(tmp_path: Path) -> None:
    path = save_image(tmp_path / "real.jpg", rgb_test_pattern(8, 8))
    renamed = _write(tmp_path, "claimed.png", path.read_bytes())
    _assert_refused(renamed, UnsupportedFileType, 415, declared_name="claimed.png")


def test_png_with_script_chunk_is_refused_as_polyglot(tmp_path: Path) -> None:
    valid = save_image(tmp_path / "ok.png", rgb_test_pattern(8, 8)).read_bytes()
    comment = png_chunk(b"tEXt", b"Comment\x00<script>alert(document.cookie)</script>")
    polyglot = valid[:33] + comment + valid[33:]  # after the 8-byte signature and the 25-byte IHDR chunk
    error = _assert_refused(_write(tmp_path, "p.png", polyglot), UnsupportedFileType, 415)
    assert "script" in error.reason


def test_jpeg_with_pdf_header_inside_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "jpdf.jpg"
    Image.fromarray(rgb_test_pattern(8, 8)).save(path, comment=b"%PDF-1.4 1 0 obj << >> endobj")
    _assert_refused(path, UnsupportedFileType, 415, declared_name="jpdf.jpg")


def test_zero_bytes_is_refused(tmp_path: Path) -> None:
    _assert_refused(_write(tmp_path, "empty.png", b""), CorruptUpload, 422, declared_name="empty.png")


@pytest.mark.parametrize("suffix", [".png", ".jpg", ".tif"])
def test_truncated_images_are_refused_even_if_pillow_would_accept_them(
    tmp_path: Path, suffix: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(ImageFile, "LOAD_TRUNCATED_IMAGES", True)  # a global someone might set
    options = {".jpg": {"quality": 95}, ".tif": {"compression": "tiff_lzw"}}.get(suffix, {})
    whole = save_image(tmp_path / f"whole{suffix}", rgb_test_pattern(300, 200), **options).read_bytes()
    cut = whole[: len(whole) * 2 // 3] if suffix != ".tif" else whole[: len(whole) // 2]
    _assert_refused(_write(tmp_path, f"cut{suffix}", cut), CorruptUpload, 422)


def test_tiny_png_claiming_ten_gigapixels_is_refused_from_its_header(tmp_path: Path) -> None:
    path = _write(tmp_path, "bomb.png", png_claiming_size(100_000, 100_000))
    assert path.stat().st_size < 100
    filters_before = list(warnings.filters)
    _assert_refused(path, TooManyPixels, 413)
    assert warnings.filters == filters_before  # the bomb warning filter did not leak


def test_png_between_our_cap_and_pillows_ceiling_is_refused(tmp_path: Path) -> None:
    path = _write(tmp_path, "big.png", png_claiming_size(20_000, 10_000))  # 200 Mpx
    error = _assert_refused(path, TooManyPixels, 413)
    assert "120 Mpx" in error.reason


def test_very_long_thin_png_is_refused_by_the_side_cap(tmp_path: Path) -> None:
    path = _write(tmp_path, "thin.png", png_claiming_size(200_000, 1))
    _assert_refused(path, TooManyPixels, 413)


@pytest.mark.parametrize("frames", [2000, 10_000])
def test_tiff_with_thousands_of_frames_is_refused_without_reading_them_all(tmp_path: Path, frames: int) -> None:
    path = _write(tmp_path, "frames.tif", tiff_with_frames(frames))
    error = _assert_refused(path, TooManyPages, 413)
    assert "500" in error.reason


def test_tiff_frame_cap_is_configurable(tmp_path: Path) -> None:
    path = _write(tmp_path, "frames.tif", tiff_with_frames(4))
    _assert_refused(path, TooManyPages, 413, limits=DecodeLimits(max_pages=3))
    assert examine_upload(path, limits=DecodeLimits(max_pages=4)).page_count == 4


def test_pdf_with_huge_page_box_is_refused_before_rendering(tmp_path: Path) -> None:
    # 14 400 pt (200 in, the largest box of the PDF 1.7 implementation limits) -> 60 000 px at 300 dpi.
    path = save_pdf_pages(tmp_path / "huge.pdf", [(612.0, 792.0), (14_400.0, 14_400.0)])
    error = _assert_refused(path, TooManyPixels, 413)
    assert "page 2" in error.reason


def test_pdf_with_more_pages_than_the_cap_is_refused(tmp_path: Path) -> None:
    path = save_pdf_pages(tmp_path / "many.pdf", [(100.0, 100.0)] * 501)
    error = _assert_refused(path, TooManyPages, 413)
    assert "501" in error.reason


@pytest.mark.parametrize(
    ("data", "kind"),
    [
        (b"%PDF-1.4\n% nothing else here\n", CorruptUpload),
        (encrypted_pdf_bytes(), EncryptedDocument),
    ],
)
def test_damaged_and_encrypted_pdfs_are_refused(tmp_path: Path, data: bytes, kind: type[UploadRefused]) -> None:
    _assert_refused(_write(tmp_path, "doc.pdf", data), kind, 422)


def test_pdf_whose_content_inflates_to_a_gibibyte_is_stopped_by_the_memory_limit(tmp_path: Path) -> None:
    """About 1 MB of file; PDFium needed 2 GB to render it in-process (measured before the limit existed)."""
    path = _write(tmp_path, "bomb.pdf", inflating_pdf_bytes(1024))
    assert path.stat().st_size < 2 * 2**20
    limits = DecodeLimits(max_decode_memory_bytes=512 * 2**20)
    error = _assert_refused(path, DecodeMemoryLimit, 413, limits=limits)
    assert error.reason.startswith("rendering page 1 of the PDF file needs more than the 512 MiB of memory")


def test_pdf_filling_its_page_ten_thousand_times_is_stopped_by_the_time_limit(tmp_path: Path) -> None:
    """Under 1 kB of file; 2000 fills took PDFium 29 s, so 10 000 take minutes without the limit."""
    path = _write(tmp_path, "slow.pdf", slow_pdf_bytes(10_000))
    assert path.stat().st_size < 1024
    error = _assert_refused(path, DecodeTimeLimit, 422, limits=DecodeLimits(max_decode_seconds=2.0))
    assert error.reason.startswith("rendering page 1 of the PDF file took longer than the limit of 2 s")


def test_file_over_the_byte_cap_is_refused(tmp_path: Path) -> None:
    path = save_image(tmp_path / "scan.png", rgb_test_pattern(64, 64))
    _assert_refused(path, FileTooLarge, 413, limits=DecodeLimits(max_file_bytes=1000))


def test_declared_name_is_never_used_as_a_path(tmp_path: Path) -> None:
    path = save_image(tmp_path / "scan.png", rgb_test_pattern(8, 8))
    info = examine_upload(path, declared_name="../../etc/passwd.png")
    assert info.path == path
    assert sorted(entry.name for entry in tmp_path.iterdir()) == ["scan.png"]


def test_limits_refuse_a_cap_above_the_decoder_ceiling() -> None:
    with pytest.raises(ValueError, match="ceiling"):
        DecodeLimits(max_pixels_per_page=300_000_000)


def test_the_memory_probe_sees_native_allocations() -> None:
    """The bound above would catch a decode: a 64 MiB native buffer shows up in the resident-set growth."""
    import numpy as np

    with measure_memory() as use:
        buffer = np.ones(64 * 2**20, dtype=np.uint8)
        del buffer
    if use.rss_growth is None:
        pytest.skip("peak RSS cannot be reset on this platform")
    assert use.rss_growth > RSS_GROWTH_LIMIT
