"""PDF pages as sheets: page sizes checked from the page box before anything is rendered, then PDFium renders.

Every page becomes one sheet rendered at `pdf_dpi` (300 by default). A page's pixel size is
ceil(width_pt x dpi / 72) x ceil(height_pt x dpi / 72), the same rounding pypdfium2's `render` uses, computed
from the effective page box (crop box, with the page's /Rotate applied) that PDFium reports without parsing the
page content. A page whose box would exceed the pixel or side cap is refused before any page is rendered.

The page box does not bound what a page costs: its content stream may inflate to gigabytes, or draw a form that
draws itself ten thousand times. So PDFium never runs in the web process: `read_page_boxes` and
`rendered_page_rows` run in a decoder process with time and memory limits (`tracedesk.imaging.decoder_tasks`),
one request at a time, which is also what PDFium (not thread-safe) needs.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pypdfium2 as pdfium
import pypdfium2.raw as pdfium_raw

from tracedesk.imaging.decode import PageInfo, check_page_size
from tracedesk.imaging.errors import CorruptUpload, EncryptedDocument
from tracedesk.imaging.limits import DecodeLimits

_POINTS_PER_INCH = 72.0
_WHITE = (255, 255, 255, 255)
_RGB_BYTES = 3


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


def pdf_page_info(index: int, box_pt: tuple[float, float], *, limits: DecodeLimits, pdf_dpi: float) -> PageInfo:
    """The sheet page `index` (zero-based) of a page box `box_pt` (width, height in points) renders to.

    Raises
    ------
    TooManyPixels
        The box would render over the pixel or side cap at `pdf_dpi`.
    CorruptUpload
        The box is not a finite positive size.
    """
    width_pt, height_pt = box_pt
    width, height = pdf_page_pixels(width_pt, height_pt, pdf_dpi=pdf_dpi)
    what = f"PDF page {index + 1} ({width_pt:.0f} x {height_pt:.0f} pt) at {pdf_dpi:g} dpi"
    check_page_size(width, height, limits=limits, what=what)
    return PageInfo(index=index, width=width, height=height, dpi=(pdf_dpi, pdf_dpi))


def read_page_boxes(path: Path, *, max_pages: int) -> tuple[int, list[tuple[float, float]]]:
    """The page count of a PDF and, when it is at most `max_pages`, every page's box in points (width, height).

    Runs in the decoder process: opening a hostile PDF can already cost memory (compressed object streams).

    Raises
    ------
    CorruptUpload, EncryptedDocument
        The document or a page's dictionary cannot be read, or the document is password-protected.
    """
    with _open_document(path) as document:
        count = len(document)
        if count > max_pages:
            return count, []  # the caller refuses it; reading thousands of page boxes would be wasted work
        boxes = []
        for index in range(count):
            try:
                boxes.append(tuple(document.get_page_size(index)))
            except pdfium.PdfiumError as exc:
                raise CorruptUpload(f"page {index + 1} of the PDF is damaged ({exc})") from exc
        return count, boxes


def _rows(bitmap: Any) -> list[memoryview]:
    row_bytes = bitmap.width * _RGB_BYTES
    buffer = memoryview(bitmap.buffer).cast("B")
    if bitmap.stride == row_bytes:
        return [buffer[: row_bytes * bitmap.height]]
    return [buffer[top : top + row_bytes] for top in range(0, bitmap.stride * bitmap.height, bitmap.stride)]


def _render(pdf_page: Any, page: PageInfo, *, pdf_dpi: float) -> Any:
    try:
        bitmap = pdf_page.render(
            scale=pdf_dpi / _POINTS_PER_INCH,
            rev_byteorder=True,  # PDFium's BGR becomes RGB
            fill_color=_WHITE,
            force_bitmap_format=pdfium_raw.FPDFBitmap_BGR,
        )
    except pdfium.PdfiumError as exc:
        raise CorruptUpload(f"page {page.index + 1} of the PDF cannot be rendered ({exc})") from exc
    if (bitmap.width, bitmap.height, bitmap.n_channels) != (page.width, page.height, _RGB_BYTES):
        bitmap.close()
        raise CorruptUpload(
            f"PDF page {page.index + 1} rendered to an unexpected size {bitmap.width} x {bitmap.height}"
        )
    return bitmap


@contextmanager
def rendered_page_rows(path: Path, page: PageInfo, *, pdf_dpi: float) -> Iterator[list[memoryview]]:
    """Render a surveyed page with PDFium on white: its pixels as 8-bit RGB rows (views valid inside the block).

    Runs in the decoder process. The rows are views of PDFium's bitmap, so the page costs its pixels once.

    Raises
    ------
    CorruptUpload
        The page cannot be rendered or renders to a size other than its survey said.
    """
    with _open_document(path) as document:
        try:
            pdf_page = document[page.index]
        except pdfium.PdfiumError as exc:
            raise CorruptUpload(f"page {page.index + 1} of the PDF cannot be loaded ({exc})") from exc
        try:
            bitmap = _render(pdf_page, page, pdf_dpi=pdf_dpi)
            try:
                yield _rows(bitmap)
            finally:
                bitmap.close()
        finally:
            pdf_page.close()
