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


def pdf_from_objects(objects: list[bytes], *, trailer: bytes = b"") -> bytes:
    """A PDF file of the given objects (numbered from 1; object 1 is the catalog) with a cross-reference table.

    Layout of PDF 1.7 (ISO 32000-1) sec. 7.5: header, ``n 0 obj ... endobj`` bodies, an ``xref`` section of
    20-byte entries, the trailer dictionary (plus `trailer` entries), ``startxref`` and ``%%EOF``.
    """
    out = bytearray(b"%PDF-1.4\n")
    offsets = []
    for number, body in enumerate(objects, start=1):
        offsets.append(len(out))
        out += f"{number} 0 obj\n".encode() + body + b"\nendobj\n"
    xref_at = len(out)
    out += f"xref\n0 {len(objects) + 1}\n0000000000 65535 f \n".encode()
    out += b"".join(f"{offset:010d} 00000 n \n".encode() for offset in offsets)
    out += b"trailer\n<< /Size %d /Root 1 0 R %s>>\n" % (len(objects) + 1, trailer)
    out += f"startxref\n{xref_at}\n%%EOF\n".encode()
    return bytes(out)


def pdf_stream(dictionary: bytes, data: bytes) -> bytes:
    """A stream object: its dictionary entries plus /Length, then the (already encoded) data."""
    return b"<< %s /Length %d >>\nstream\n" % (dictionary, len(data)) + data + b"\nendstream"


def one_page_pdf(content: bytes, *, box_pt: tuple[int, int] = (100, 100), resources: bytes = b"") -> bytes:
    """A one-page PDF whose page (MediaBox `box_pt` in points) draws `content`, stored Flate-compressed."""
    page = b"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 %d %d] /Resources << %s >> /Contents 4 0 R >>" % (
        *box_pt,
        resources,
    )
    return pdf_one_page_with_stream(page, pdf_stream(b"/Filter /FlateDecode", zlib.compress(content, 9)))


def pdf_one_page_with_stream(page: bytes, contents: bytes, *extra: bytes) -> bytes:
    """Catalog, page tree, the `page` dictionary (object 3), its `contents` (object 4), then `extra` objects."""
    catalog, pages = b"<< /Type /Catalog /Pages 2 0 R >>", b"<< /Type /Pages /Kids [3 0 R] /Count 1 >>"
    return pdf_from_objects([catalog, pages, page, contents, *extra])


def slow_pdf_bytes(fills: int) -> bytes:
    """A Letter page (612 x 792 pt) whose content fills the whole page `fills` times: about 0.6 kB of file.

    Each fill paints every pixel of the page (2550 x 3300 at 300 dpi), so rendering takes time in proportion
    to `fills` while the file stays tiny (measured with PDFium on this project's machine: 2000 fills, 29 s).
    """
    return one_page_pdf(b"0 0 612 792 re f\n" * fills, box_pt=(612, 792))


def adler32_of_run(byte: int, count: int) -> int:
    """Adler-32 of `count` copies of `byte`, in closed form from its definition (RFC 1950 sec. 8.2):
    A = 1 + sum of the bytes, B = sum of the successive values of A, both modulo 65521; the checksum is B A."""
    first = (1 + count * byte) % 65521
    second = (count + byte * count * (count + 1) // 2) % 65521
    return (second << 16) | first


def zlib_bomb(size: int, fill: int = 0x20) -> bytes:
    """A zlib stream (RFC 1950) that inflates to `size` bytes of the byte `fill`: about 1 kB per MiB.

    Built in a moment rather than by compressing gigabytes: after a full flush deflate ends its block on a byte
    boundary with the history reset (zlib manual, Z_FULL_FLUSH), so every further MiB compresses to the same
    bytes. The stream ends with an empty final stored block (RFC 1951 sec. 3.2.4: BFINAL=1, BTYPE=00, LEN=0,
    NLEN=0xFFFF) and the Adler-32 of all the data.
    """
    mebibyte = bytes([fill]) * 2**20
    whole, rest = divmod(size, 2**20)
    compressor = zlib.compressobj(9)

    def compressed(data: bytes) -> bytes:
        return compressor.compress(data) + compressor.flush(zlib.Z_FULL_FLUSH)

    first = compressed(mebibyte if whole else mebibyte[:rest])  # carries the 2-byte zlib header
    repeated = compressed(mebibyte) * (whole - 1) if whole > 1 else b""
    tail = compressed(mebibyte[:rest]) if whole and rest else b""
    trailer = b"\x01\x00\x00\xff\xff" + struct.pack(">I", adler32_of_run(fill, size))
    return first + repeated + tail + trailer


def inflating_pdf_bytes(mebibytes: int) -> bytes:
    """A 100 x 100 pt page whose content stream inflates to `mebibytes` MiB of spaces (a decompression bomb).

    PDFium inflates a content stream whole before parsing it, growing its buffer as it goes (measured: a
    1 GiB stream took 2 GB of memory to render).
    """
    page = b"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 100 100] /Contents 4 0 R >>"
    return pdf_one_page_with_stream(page, pdf_stream(b"/Filter /FlateDecode", zlib_bomb(mebibytes * 2**20)))


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
    file_id = b"ab" * 16
    return pdf_from_objects(objects, trailer=b"/Encrypt 4 0 R /ID [<%s> <%s>] " % (file_id, file_id))


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
