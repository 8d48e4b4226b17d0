"""The hostile upload corpus, generated: each entry is a file someone might send to break or abuse the upload.

Byte layouts follow the format specifications (from memory, checked by Pillow, libvips and PDFium refusing or
reading the results): PNG chunks and IHDR (ISO/IEC 15948 sec. 5.3, 11.2.2), the JPEG SOF0 segment (ITU-T T.81
sec. B.2.2), a classic TIFF IFD (TIFF 6.0 sec. 2). The builders of tests/imaging/imaging_samples.py are reused.
"""

from __future__ import annotations

import io
import struct
import tempfile
import zipfile
import zlib
from dataclasses import dataclass
from pathlib import Path

from PIL import Image

from tests.archive.scans import chart_image, encoded, png_bytes
from tests.imaging.imaging_samples import (
    PNG_SIGNATURE,
    encrypted_pdf_bytes,
    inflating_pdf_bytes,
    png_chunk,
    png_claiming_size,
    save_pdf_pages,
    slow_pdf_bytes,
    tiff_with_frames,
)

SVG = b'<?xml version="1.0"?><svg xmlns="http://www.w3.org/2000/svg"><script>alert(1)</script></svg>'
EPS = b"%!PS-Adobe-3.0 EPSF-3.0\n%%BoundingBox: 0 0 10 10\nshowpage\n"
HTML = b"<!DOCTYPE html><html><body><img src=x onerror=alert(document.cookie)></body></html>"


@dataclass(frozen=True)
class Hostile:
    """One corpus entry: what is sent and the status it must be refused with."""

    label: str
    filename: str
    data: bytes
    media_type: str
    status: int


def png_bomb(side: int) -> bytes:
    """A real greyscale PNG of side x side zero pixels: ~side^2 / 1000 bytes that inflate to side^2 bytes."""
    header = struct.pack(">IIBBBBB", side, side, 8, 0, 0, 0, 0)
    compressor = zlib.compressobj(9)
    row = b"\x00" * (side + 1)  # filter byte + pixels
    body = b"".join(compressor.compress(row) for _ in range(side)) + compressor.flush()
    return PNG_SIGNATURE + png_chunk(b"IHDR", header) + png_chunk(b"IDAT", body) + png_chunk(b"IEND", b"")


def jpeg_claiming_size(width: int, height: int) -> bytes:
    """A small valid JPEG whose SOF0 segment is patched to claim width x height."""
    data = bytearray(encoded(chart_image(64, 48), "JPEG", quality=80))
    at = data.index(b"\xff\xc0")
    data[at + 5 : at + 9] = struct.pack(">HH", height, width)
    return bytes(data)


def tiff_claiming_size(width: int, height: int) -> bytes:
    """A one-IFD little-endian TIFF claiming width x height 8-bit grey pixels, holding one byte of data."""
    tags = [(256, 4, width), (257, 4, height), (258, 3, 8), (259, 3, 1), (262, 3, 1), (273, 4, 8), (277, 3, 1)]
    tags += [(278, 4, height), (279, 4, 1)]
    out = bytearray(b"II*\x00" + struct.pack("<I", 10) + b"\x80\x00" + struct.pack("<H", len(tags)))
    for tag, kind, value in tags:
        packed = struct.pack("<HH", value, 0) if kind == 3 else struct.pack("<I", value)
        out += struct.pack("<HHI", tag, kind, 1) + packed
    return bytes(out + struct.pack("<I", 0))


def pdf_bytes_with_pages(sizes_pt: list[tuple[float, float]]) -> bytes:
    with tempfile.TemporaryDirectory() as folder:
        return save_pdf_pages(Path(folder) / "doc.pdf", sizes_pt).read_bytes()


def png_with_script_chunk() -> bytes:
    valid = png_bytes(seed=9)
    comment = png_chunk(b"tEXt", b"Comment\x00<script>alert(document.cookie)</script>")
    return valid[:33] + comment + valid[33:]  # after the signature and the IHDR chunk


def png_with_zip_appended() -> bytes:
    archive = io.BytesIO()
    with zipfile.ZipFile(archive, "w") as bundle:
        bundle.writestr("index.html", HTML)
    return png_bytes(seed=10) + archive.getvalue()


def jpeg_with_pdf_comment() -> bytes:
    buffer = io.BytesIO()
    chart_image(64, 48).save(buffer, format="JPEG", comment=b"%PDF-1.4 1 0 obj << >> endobj")
    return buffer.getvalue()


def jpeg_with_html_appended() -> bytes:
    return encoded(chart_image(64, 48), "JPEG") + HTML


def truncated(data: bytes, keep: float) -> bytes:
    return data[: int(len(data) * keep)]


def tiff_bytes(image: Image.Image) -> bytes:
    return encoded(image, "TIFF", compression="tiff_lzw")


def corpus() -> list[Hostile]:
    """Every hostile file with the status it must get (415 wrong type, 413 too big, 422 damaged or too slow).

    The two PDFs whose cost the page box hides go past the decoder's memory and time limits, production
    defaults (2048 MiB, 60 s) as well as the campaign's (campaign.py).
    """
    jpeg = encoded(chart_image(), "JPEG", quality=90)
    png = png_bytes(seed=11)
    tiff = tiff_bytes(chart_image(300, 200))
    entries = [
        Hostile("wrong magic bytes", "scan.png", b"just text claiming to be an image " * 8, "image/png", 415),
        Hostile("SVG renamed .png", "drawing.png", SVG, "image/png", 415),
        Hostile("SVG as itself", "drawing.svg", SVG, "image/svg+xml", 415),
        Hostile("EPS renamed .png", "figure.png", EPS, "image/png", 415),
        Hostile("EPS (DOS binary) renamed .tif", "figure.tif", b"\xc5\xd0\xd3\xc6" + b"\x00" * 60, "image/tiff", 415),
        Hostile("HTML renamed .png", "page.png", HTML, "image/png", 415),
        Hostile("GIF renamed .png", "anim.png", b"GIF89a\x01\x00\x01\x00\x00\x00\x00;", "image/png", 415),
        Hostile("JPEG named .png", "photo.png", jpeg, "image/png", 415),
        Hostile("PNG sent as text/html", "scan.png", png, "text/html", 415),
        Hostile("PNG named .html", "scan.html", png, "application/octet-stream", 415),
        Hostile("polyglot: PNG with script chunk", "note.png", png_with_script_chunk(), "image/png", 415),
        Hostile("polyglot: PNG + ZIP appended", "bundle.png", png_with_zip_appended(), "image/png", 415),
        Hostile("polyglot: JPEG with PDF header", "jpdf.jpg", jpeg_with_pdf_comment(), "image/jpeg", 415),
        Hostile("polyglot: JPEG + HTML appended", "tail.jpg", jpeg_with_html_appended(), "image/jpeg", 415),
        Hostile("`../` name, garbage content", "../../etc/passwd.png", b"root:x:0:0:root:/root:/bin/sh\n", "", 415),
        Hostile("zero bytes", "empty.png", b"", "image/png", 422),
        Hostile("truncated PNG", "cut.png", truncated(png_bytes(seed=12, width=900, height=600), 0.5), "", 422),
        Hostile("truncated JPEG", "cut.jpg", truncated(jpeg, 0.6), "image/jpeg", 422),
        Hostile("truncated TIFF", "cut.tif", truncated(tiff, 0.5), "image/tiff", 422),
        Hostile("70-byte PNG claiming 10 Gpx", "bomb.png", png_claiming_size(100_000, 100_000), "image/png", 413),
        Hostile("PNG claiming 200 000 x 1 px", "thin.png", png_claiming_size(200_000, 1), "image/png", 413),
        Hostile("JPEG claiming 65 000 x 65 000 px", "huge.jpg", jpeg_claiming_size(65_000, 65_000), "image/jpeg", 413),
        Hostile("TIFF claiming 60 000 x 60 000 px", "huge.tif", tiff_claiming_size(60_000, 60_000), "image/tiff", 413),
        Hostile("decompression bomb: real 225 Mpx PNG", "zeros.png", png_bomb(15_000), "image/png", 413),
        Hostile("TIFF with 2 000 frames", "frames.tif", tiff_with_frames(2_000), "image/tiff", 413),
        Hostile("TIFF with 10 000 frames", "frames.tif", tiff_with_frames(10_000), "image/tiff", 413),
        Hostile("PDF with 2 000 pages", "many.pdf", pdf_bytes_with_pages([(100.0, 100.0)] * 2_000), "", 413),
        Hostile("PDF with 10 000 pages", "many.pdf", pdf_bytes_with_pages([(72.0, 72.0)] * 10_000), "", 413),
        Hostile("PDF with a 200 x 200 in page box", "huge.pdf", pdf_bytes_with_pages([(14_400.0, 14_400.0)]), "", 413),
        Hostile("PDF content inflating to 2 GiB (2 MB file)", "inflates.pdf", inflating_pdf_bytes(2048), "", 413),
        Hostile("PDF filling its page 10 000 times (1 kB file)", "slow.pdf", slow_pdf_bytes(10_000), "", 422),
        Hostile("damaged PDF", "doc.pdf", b"%PDF-1.4\n% nothing else here\n", "application/pdf", 422),
        Hostile("password-protected PDF", "locked.pdf", encrypted_pdf_bytes(), "application/pdf", 422),
    ]
    return entries
