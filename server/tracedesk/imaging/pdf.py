"""PDF pages as sheets: page sizes checked from the page box before anything is rendered, then PDFium renders.

Every page becomes one sheet rendered at `pdf_dpi` (300 by default). A page's pixel size is
ceil(width_pt x dpi / 72) x ceil(height_pt x dpi / 72), the same rounding pypdfium2's `render` uses, computed
from the effective page box (crop box, with the page's /Rotate applied) that PDFium reports without parsing the
page content. A page whose box would exceed the pixel or side cap is refused before any page is rendered.

PDFium is not thread-safe, so every call into it holds `_PDFIUM_LOCK`; uploads from several request threads
render one page at a time. Rendering time of hostile content is not bounded here: run untrusted PDFs in a
worker process with a time and memory limit (`tracedesk.jobs`) if that matters for a deployment.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np
import pypdfium2 as pdfium
import pypdfium2.raw as pdfium_raw
import pyvips

from tracedesk.imaging.decode import PageInfo, check_page_size
from tracedesk.imaging.errors import CorruptUpload, EncryptedDocument, TooManyPages
from tracedesk.imaging.limits import DecodeLimits

_PDFIUM_LOCK = threading.Lock()
_POINTS_PER_INCH = 72.0
_WHITE = (255, 255, 255, 255)


@contextmanager
def _open_document(path: Path) -> Iterator[Any]:
    try:
        document = pdfium.PdfDocument(str(path))
    except pdfium.PdfiumError as exc:
        if exc.err_code in (pdfium_raw.FPDF_ERR_PASSWORD, pdfium_raw.FPDF_ERR_SECURITY):
            raise EncryptedDocument("the PDF is password-protected; upload an unprotected copy") from exc
        raise CorruptUpload(f"the PDF file is damaged and cannot be opened ({exc})") from exc
    try:
        yield document
    finally:
        document.close()


def pdf_page_pixels(width_pt: float, height_pt: float, *, pdf_dpi: float) -> tuple[int, int]:
    """Pixel size of a page box of `width_pt` x `height_pt` points rendered at `pdf_dpi` dots per inch.

    Raises
    ------
    CorruptUpload
        The box is not a finite positive size.
    """
    if not (math.isfinite(width_pt) and math.isfinite(height_pt)) or width_pt <= 0 or height_pt <= 0:
        raise CorruptUpload(f"a PDF page has an invalid page box ({width_pt!r} x {height_pt!r} points)")
    scale = pdf_dpi / _POINTS_PER_INCH
    return math.ceil(width_pt * scale), math.ceil(height_pt * scale)


def _page_info(document: Any, index: int, *, limits: DecodeLimits, pdf_dpi: float) -> PageInfo:
    try:
        width_pt, height_pt = document.get_page_size(index)
    except pdfium.PdfiumError as exc:
        raise CorruptUpload(f"page {index + 1} of the PDF is damaged ({exc})") from exc
    width, height = pdf_page_pixels(width_pt, height_pt, pdf_dpi=pdf_dpi)
    what = f"PDF page {index + 1} ({width_pt:.0f} x {height_pt:.0f} pt) at {pdf_dpi:g} dpi"
    check_page_size(width, height, limits=limits, what=what)
    return PageInfo(index=index, width=width, height=height, dpi=(pdf_dpi, pdf_dpi))


def survey_pdf(path: Path, *, limits: DecodeLimits, pdf_dpi: float) -> list[PageInfo]:
    """Count the pages of a PDF and check each page's rendered size against the caps, rendering nothing.

    Raises
    ------
    TooManyPages
        More pages than `limits.max_pages` (checked before any page box is read).
    TooManyPixels
        A page box would render over the pixel or side cap at `pdf_dpi`.
    CorruptUpload, EncryptedDocument
        The document cannot be opened, has no pages, or is password-protected.
    """
    with _PDFIUM_LOCK, _open_document(path) as document:
        count = len(document)
        if count < 1:
            raise CorruptUpload("the PDF has no pages")
        if count > limits.max_pages:
            raise TooManyPages(f"the PDF has {count} pages; the limit is {limits.max_pages}")
        return [_page_info(document, index, limits=limits, pdf_dpi=pdf_dpi) for index in range(count)]


def _render_to_array(document: Any, page: PageInfo, *, pdf_dpi: float) -> np.ndarray[Any, Any]:
    pdf_page = document[page.index]
    try:
        bitmap = pdf_page.render(scale=pdf_dpi / _POINTS_PER_INCH, rev_byteorder=True, fill_color=_WHITE)
        try:
            # A contiguous copy we own: the bitmap's buffer is freed when it closes, and rows may be padded.
            return np.array(bitmap.to_numpy(), dtype=np.uint8, order="C", copy=True)
        finally:
            bitmap.close()
    except pdfium.PdfiumError as exc:
        raise CorruptUpload(f"page {page.index + 1} of the PDF cannot be rendered ({exc})") from exc
    finally:
        pdf_page.close()


def render_pdf_page(path: Path, page: PageInfo, *, pdf_dpi: float) -> Any:
    """Render one surveyed PDF page to a lazily copied `pyvips.Image` (3-band 8-bit sRGB, white background).

    Raises
    ------
    CorruptUpload
        The page cannot be rendered or renders to a size other than its survey said.
    """
    with _PDFIUM_LOCK, _open_document(path) as document:
        pixels = _render_to_array(document, page, pdf_dpi=pdf_dpi)
    if pixels.shape != (page.height, page.width, 3):
        raise CorruptUpload(f"PDF page {page.index + 1} rendered to an unexpected size {pixels.shape[:2]}")
    image = pyvips.Image.new_from_memory(pixels.data, page.width, page.height, 3, "uchar")
    return image.copy(interpretation="srgb")
