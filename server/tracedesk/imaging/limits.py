"""Caps that keep decoding bounded in memory and time, whatever the upload claims about itself.

The defaults match `tracedesk.config.Settings` (512 MiB, 120 Mpx, 500 pages, 300 dpi, 60 s a page, 600 s a file,
2048 MiB, 2 decodes at once). 120 Mpx
holds an A3 sheet at 600 dpi (about 7000 x 9900 px = 69 Mpx) with room to spare; an A0 plot at 300 dpi
(139 Mpx) needs a lower PDF resolution or a raised cap.

The size caps are checked from headers and page boxes before anything is decoded. What they cannot bound (a
PDF page's content stream may inflate to gigabytes or redraw itself millions of times inside a small page box;
a progressive JPEG may be slow to decode) is bounded by running every decode in a child process with a
wall-clock time limit and an address-space limit (`tracedesk.imaging.decoder_process`). A 120 Mpx page at 3
bytes a pixel is 360 MB, so 2048 MiB leaves the renderer room for its own work.

The time limit per page alone would let a 500-page PDF whose pages each take just under it hold a decoder for
more than eight hours, so all the pages of one file share a budget too: ten times the page limit by default,
enough for the longest plausible scan batch (a few dozen pages at a few seconds each) with room to spare.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

#: Pillow's own bomb threshold (`PIL.Image.MAX_IMAGE_PIXELS`), set once by `tracedesk.imaging.decode`.
#: Our per-page cap must stay at or below it so Pillow's warning only ever fires on files we refuse anyway.
PILLOW_PIXEL_CEILING = 250_000_000

DEFAULT_MAX_FILE_BYTES = 512 * 1024 * 1024
DEFAULT_MAX_PIXELS_PER_PAGE = 120_000_000
DEFAULT_MAX_PAGES = 500
#: A 1 x 120 Mpx image passes the pixel cap but would make a pyramid of ~470 000 tiles: cap each side too.
DEFAULT_MAX_SIDE_PIXELS = 100_000
DEFAULT_PDF_DPI = 300.0
DEFAULT_DECODE_SECONDS = 60.0
DEFAULT_FILE_DECODE_SECONDS = 10 * DEFAULT_DECODE_SECONDS
#: Two cores on the reference machine: two decodes in parallel use them and bound memory to twice the limit.
DEFAULT_PARALLEL_DECODES = 2
DEFAULT_DECODE_MEMORY_BYTES = 2048 * 2**20
#: Below this the decoder process cannot hold its own libraries (numpy, libvips, PDFium: about 200 MiB of
#: address space once imported), so a lower limit would refuse every file.
MIN_DECODE_MEMORY_BYTES = 256 * 2**20
#: PDFs are rendered between these resolutions (dots per inch); outside them the request is a mistake.
PDF_DPI_RANGE = (36.0, 1200.0)


@dataclass(frozen=True, slots=True)
class DecodeLimits:
    """The caps applied to one upload.

    Attributes
    ----------
    max_file_bytes
        Largest accepted file, in bytes.
    max_pixels_per_page
        Largest width x height of any page (image, TIFF frame, or PDF page at the render resolution), in pixels.
        At most `PILLOW_PIXEL_CEILING`.
    max_pages
        Most TIFF frames or PDF pages in one file.
    max_side_pixels
        Longest accepted width or height of any page, in pixels.
    max_decode_seconds
        Wall-clock time allowed to decode one page (render one PDF page, or survey a PDF), in seconds; the
        decoder process's processor time is capped too (see `tracedesk.imaging.decoder_process`).
    max_file_decode_seconds
        Wall-clock time all the page decodes of one file may take together, in seconds (the time the decoder
        process spends on the requests, not waiting for a turn or starting up). It may be below
        `max_decode_seconds`, and then binds first.
    max_decode_memory_bytes
        Address space of the decoder process (RLIMIT_AS), in bytes; at least `MIN_DECODE_MEMORY_BYTES`.
    max_parallel_decodes
        How many decodes may run at once in the whole web process (this upload's included): decoding never holds
        more than that many times `max_decode_memory_bytes`. A process-wide cap, so every upload of a process
        should carry the same value (see `tracedesk.imaging.decoder_process`).
    """

    max_file_bytes: int = DEFAULT_MAX_FILE_BYTES
    max_pixels_per_page: int = DEFAULT_MAX_PIXELS_PER_PAGE
    max_pages: int = DEFAULT_MAX_PAGES
    max_side_pixels: int = DEFAULT_MAX_SIDE_PIXELS
    max_decode_seconds: float = DEFAULT_DECODE_SECONDS
    max_decode_memory_bytes: int = DEFAULT_DECODE_MEMORY_BYTES
    max_file_decode_seconds: float = DEFAULT_FILE_DECODE_SECONDS
    max_parallel_decodes: int = DEFAULT_PARALLEL_DECODES

    def __post_init__(self) -> None:
        for name in ("max_file_bytes", "max_pixels_per_page", "max_pages", "max_side_pixels", "max_parallel_decodes"):
            if getattr(self, name) < 1:
                raise ValueError(f"DecodeLimits.{name} must be a positive integer")
        for name in ("max_decode_seconds", "max_file_decode_seconds"):
            seconds = getattr(self, name)
            if not (math.isfinite(seconds) and seconds > 0):
                raise ValueError(f"DecodeLimits.{name} must be a positive number, got {seconds!r}")
        if self.max_decode_memory_bytes < MIN_DECODE_MEMORY_BYTES:
            raise ValueError(
                f"DecodeLimits.max_decode_memory_bytes must be at least {MIN_DECODE_MEMORY_BYTES // 2**20} MiB, "
                f"got {self.max_decode_memory_bytes / 2**20:g} MiB"
            )
        if self.max_pixels_per_page > PILLOW_PIXEL_CEILING:
            raise ValueError(
                f"DecodeLimits.max_pixels_per_page={self.max_pixels_per_page} is above the decoder ceiling "
                f"of {PILLOW_PIXEL_CEILING} pixels"
            )


DEFAULT_LIMITS = DecodeLimits()


def check_pdf_dpi(pdf_dpi: float) -> float:
    """Return `pdf_dpi` if it is a sensible render resolution, else raise ValueError (a caller's mistake)."""
    low, high = PDF_DPI_RANGE
    if not low <= pdf_dpi <= high:
        raise ValueError(f"pdf_dpi must be between {low:g} and {high:g} dots per inch, got {pdf_dpi!r}")
    return float(pdf_dpi)
