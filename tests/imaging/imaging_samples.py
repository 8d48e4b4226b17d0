"""Small generated and hand-crafted files for the imaging tests, and a memory probe.

Byte layouts follow the format specifications (from memory, checked by Pillow and libvips reading the results):
PNG chunks are length, type, data, CRC-32 of type + data (PNG spec, ISO/IEC 15948, sec. 5.3); a classic TIFF is an
8-byte header then IFDs of 12-byte entries sorted by tag, each followed by the offset of the next IFD (TIFF 6.0,
sec. 2).
"""

from __future__ import annotations

import struct
import tracemalloc
import zlib
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pypdfium2 as pdfium
from PIL import Image

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def png_chunk(kind: bytes, data: bytes) -> bytes:
    """One PNG chunk with a correct CRC."""
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)


def png_claiming_size(width: int, height: int) -> bytes:
    """A ~70-byte PNG whose IHDR (CRC correct) claims width x height RGB pixels, with one tiny IDAT."""
    header = struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0)
    pixels = zlib.compress(b"\x00\x00\x00\x00")
    return PNG_SIGNATURE + png_chunk(b"IHDR", header) + png_chunk(b"IDAT", pixels) + png_chunk(b"IEND", b"")


def tiff_with_frames(frames: int) -> bytes:
    """A little-endian TIFF with `frames` 1 x 1 greyscale frames sharing one pixel byte (about 126 B/frame)."""
    entries_per_ifd = 9
    ifd_size = 2 + 12 * entries_per_ifd + 4
    pixel_offset = 8
    first_ifd = 10  # header (8) + pixel byte + pad
    out = bytearray(b"II*\x00" + struct.pack("<I", first_ifd) + b"\x80\x00")
    for index in range(frames):
        next_ifd = first_ifd + (index + 1) * ifd_size if index + 1 < frames else 0
        tags = [
            (256, 3, 1, 1),  # ImageWidth
            (257, 3, 1, 1),  # ImageLength
            (258, 3, 1, 8),  # BitsPerSample
            (259, 3, 1, 1),  # Compression: none
            (262, 3, 1, 1),  # PhotometricInterpretation: BlackIsZero
            (273, 4, 1, pixel_offset),  # StripOffsets
            (277, 3, 1, 1),  # SamplesPerPixel
            (278, 3, 1, 1),  # RowsPerStrip
            (279, 4, 1, 1),  # StripByteCounts
        ]
        out += struct.pack("<H", entries_per_ifd)
        for tag, kind, count, value in tags:
            packed = struct.pack("<HH", value, 0) if kind == 3 else struct.pack("<I", value)
            out += struct.pack("<HHI", tag, kind, count) + packed
        out += struct.pack("<I", next_ifd)
    return bytes(out)


def save_pdf_pages(path: Path, page_sizes_pt: list[tuple[float, float]], *, rotation: int = 0) -> Path:
    """A PDF with blank pages of the given sizes in points, written by PDFium itself."""
    document = pdfium.PdfDocument.new()
    for width, height in page_sizes_pt:
        page = document.new_page(width, height)
        if rotation:
            page.set_rotation(rotation)
        page.close()
    document.save(str(path))
    document.close()
    return path


def encrypted_pdf_bytes() -> bytes:
    """A one-page PDF with a Standard security handler (R2) whose /U entry no password matches.

    PDFium tries the empty user password, fails the /U comparison (PDF 1.7, sec. 7.6.3.4) and reports a password
    error, which is all the test needs.
    """
    objects = [
        b"<< /Type /Catalog /Pages 2 0 R >>",
        b"<< /Type /Pages /Kids [3 0 R] /Count 1 >>",
        b"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 100 100] >>",
        b"<< /Filter /Standard /V 1 /R 2 /Length 40 /P -4 /O <" + b"11" * 32 + b"> /U <" + b"22" * 32 + b"> >>",
    ]
    out = bytearray(b"%PDF-1.4\n")
    offsets = []
    for number, body in enumerate(objects, start=1):
        offsets.append(len(out))
        out += f"{number} 0 obj\n".encode() + body + b"\nendobj\n"
    xref_at = len(out)
    out += f"xref\n0 {len(objects) + 1}\n0000000000 65535 f \n".encode()
    out += b"".join(f"{offset:010d} 00000 n \n".encode() for offset in offsets)
    file_id = "ab" * 16
    trailer = f"<< /Size {len(objects) + 1} /Root 1 0 R /Encrypt 4 0 R /ID [<{file_id}> <{file_id}>] >>"
    out += f"trailer\n{trailer}\n".encode()
    out += f"startxref\n{xref_at}\n%%EOF\n".encode()
    return bytes(out)


def rgb_test_pattern(width: int, height: int, *, seed: int = 0) -> np.ndarray:
    """A random RGB uint8 image (height, width, 3): any mix-up of rows, columns or channels changes it."""
    return np.random.default_rng(seed).integers(0, 256, size=(height, width, 3), dtype=np.uint8)


def save_image(path: Path, pixels: np.ndarray, **options: object) -> Path:
    """Save a numpy image with Pillow and return the path."""
    Image.fromarray(pixels).save(path, **options)
    return path


def _status_kib(field: str) -> int:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1])
    raise LookupError(field)


def _reset_peak_rss() -> bool:
    # Linux: writing 5 to clear_refs resets VmHWM (the peak resident set) to the current RSS.
    try:
        Path("/proc/self/clear_refs").write_text("5")
    except OSError:
        return False
    return True


@dataclass
class MemoryUse:
    """Peak Python allocations (tracemalloc) and peak resident-set growth (C allocations too), in bytes."""

    python_peak: int = 0
    rss_growth: int | None = None


@contextmanager
def measure_memory() -> Iterator[MemoryUse]:
    """Measure the memory a block needs: tracemalloc's peak and, on Linux, the growth of the peak RSS."""
    use = MemoryUse()
    can_reset = _reset_peak_rss()
    rss_before = _status_kib("VmRSS")
    tracemalloc.start()
    try:
        yield use
    finally:
        use.python_peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        if can_reset:
            use.rss_growth = max(0, _status_kib("VmHWM") - rss_before) * 1024
