"""Format identification from magic bytes, and agreement with the declared name and media type.

Signatures are those of the format specifications (from memory): PNG 89 50 4E 47 0D 0A 1A 0A (ISO/IEC 15948),
JPEG SOI FF D8 then a marker FF (ITU T.81), TIFF "II*\\0" / "MM\\0*" and BigTIFF "II+\\0" (TIFF 6.0 / BigTIFF),
PDF "%PDF-" (ISO 32000-1, 7.5.2), GIF "GIF89a", DOS EPS binary header C5 D0 D3 C6 (Adobe TN 5002).
"""

from __future__ import annotations

import pytest

from tracedesk.imaging import ImageFormat, UnsupportedFileType, identify_format, sniff_format
from tracedesk.imaging.formats import describe_content, format_from_media_type, format_from_name

PNG_HEAD = b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR"
JPEG_HEAD = b"\xff\xd8\xff\xe0\x00\x10JFIF\x00"


@pytest.mark.parametrize(
    ("head", "expected"),
    [
        (PNG_HEAD, ImageFormat.PNG),
        (JPEG_HEAD, ImageFormat.JPEG),
        (b"II*\x00\x08\x00\x00\x00", ImageFormat.TIFF),
        (b"MM\x00*\x00\x00\x00\x08", ImageFormat.TIFF),
        (b"II+\x00\x08\x00\x00\x00", ImageFormat.TIFF),
        (b"%PDF-1.7\n", ImageFormat.PDF),
        (b"GIF89a\x01\x00", None),
        (b"\x89PNG\r\n", None),  # truncated signature
        (b" %PDF-1.4", None),  # PDF readers tolerate leading junk; we do not
        (b"", None),
    ],
)
def test_sniff_format_reads_only_the_signature(head: bytes, expected: ImageFormat | None) -> None:
    assert sniff_format(head) is expected


@pytest.mark.parametrize(
    ("name", "expected"),
    [
        ("scan.PNG", ImageFormat.PNG),
        ("scan.jpeg", ImageFormat.JPEG),
        ("folder\\scan.tif", ImageFormat.TIFF),
        ("a.b.pdf", ImageFormat.PDF),
        ("no_extension", None),
    ],
)
def test_format_from_name_maps_accepted_extensions(name: str, expected: ImageFormat | None) -> None:
    assert format_from_name(name) is expected


@pytest.mark.parametrize("name", ["chart.svg", "chart.html", "chart.eps", "chart.gif", "a.png\x00.svg"])
def test_format_from_name_refuses_other_extensions(name: str) -> None:
    with pytest.raises(UnsupportedFileType) as refused:
        format_from_name(name)
    assert refused.value.http_status == 415


def test_media_type_parameters_and_octet_stream_are_handled() -> None:
    assert format_from_media_type("image/PNG; charset=binary") is ImageFormat.PNG
    assert format_from_media_type("application/octet-stream") is None
    with pytest.raises(UnsupportedFileType, match="image/svg"):
        format_from_media_type("image/svg+xml")


@pytest.mark.parametrize(
    ("head", "words"),
    [
        (b'<?xml version="1.0"?>\n<svg xmlns="http://www.w3.org/2000/svg">', "SVG"),
        (b"<!DOCTYPE html><html>", "HTML"),
        (b"%!PS-Adobe-3.0 EPSF-3.0", "PostScript"),
        (b"\xc5\xd0\xd3\xc6\x20\x00\x00\x00", "EPS"),
        (b"GIF89a", "GIF"),
        (b"", "empty"),
    ],
)
def test_refusals_say_what_the_file_is(head: bytes, words: str) -> None:
    assert words in describe_content(head)
    with pytest.raises(UnsupportedFileType, match=words):
        identify_format(head, declared_name="chart.png")


@pytest.mark.parametrize(
    ("head", "name", "media_type"),
    [
        (JPEG_HEAD, "scan.png", None),  # content JPEG, name PNG
        (PNG_HEAD, "scan.pdf", None),
        (PNG_HEAD, None, "application/pdf"),
        (b"%PDF-1.4\n", "scan.tiff", "application/pdf"),
    ],
)
def test_content_that_disagrees_with_its_claims_is_refused(
    head: bytes, name: str | None, media_type: str | None
) -> None:
    with pytest.raises(UnsupportedFileType, match="must be what its name says") as refused:
        identify_format(head, declared_name=name, declared_media_type=media_type)
    assert refused.value.http_status == 415


@pytest.mark.parametrize(
    "marker", [b"%PDF-1.5", b"<html>", b"<SCRIPT>alert(1)</script>", b"<svg onload=x>", b"%!PS-Adobe"]
)
def test_raster_polyglots_are_refused(marker: bytes) -> None:
    head = PNG_HEAD + b"\x00" * 40 + b"tEXtComment\x00" + marker
    with pytest.raises(UnsupportedFileType, match="also contains"):
        identify_format(head, declared_name="scan.png")


def test_agreeing_claims_pass() -> None:
    assert identify_format(PNG_HEAD, declared_name="x.png", declared_media_type="image/png") is ImageFormat.PNG
    assert identify_format(JPEG_HEAD, declared_name="noext", declared_media_type="") is ImageFormat.JPEG
