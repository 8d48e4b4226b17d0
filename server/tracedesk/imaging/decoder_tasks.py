"""What the decoder process does for the web process, and the requests that ask for it.

Two operations (`OPERATIONS`), each answering with a `decoder_wire` reply:

``pdf_pages``
    The PDF's page count and page boxes in points (`pdf.read_page_boxes`): ``{"count", "boxes"}``.
``decode_page``
    One page decoded and normalised to 8-bit sRGB (raster files through `decode.load_raster_page` and
    `normalise.normalise_page`, PDF pages through `pdf.rendered_page_rows`): ``{"width", "height", "xres",
    "yres", "payload_bytes"}`` followed by the pixels, rows top to bottom, 3 bytes a pixel.

A libvips allocation that fails under the memory limit surfaces as a decoding error whose text says "out of
memory"; it is reported as the memory limit it is, not as a damaged file.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

from tracedesk.imaging.decode import PageInfo, load_raster_page
from tracedesk.imaging.decoder_wire import Operation, Respond
from tracedesk.imaging.errors import CorruptUpload
from tracedesk.imaging.formats import ImageFormat
from tracedesk.imaging.normalise import normalise_page
from tracedesk.imaging.pdf import read_page_boxes, rendered_page_rows

PDF_PAGES = "pdf_pages"
DECODE_PAGE = "decode_page"
RGB_BYTES = 3
_MM_PER_INCH = 25.4
#: Rows of a normalised raster page copied out per piece of the payload (a 7000 px wide strip is 5 MB).
_STRIP_ROWS = 256


def pdf_pages_arguments(path: Path, *, max_pages: int) -> dict[str, Any]:
    """The arguments of a ``pdf_pages`` request."""
    return {"path": str(path), "max_pages": max_pages}


def decode_page_arguments(
    path: Path, image_format: ImageFormat, page: PageInfo, *, pdf_dpi: float | None
) -> dict[str, Any]:
    """The arguments of a ``decode_page`` request."""
    return {
        "path": str(path),
        "format": image_format.name,
        "page": {
            "index": page.index,
            "width": page.width,
            "height": page.height,
            "dpi": None if page.dpi is None else list(page.dpi),
            "orientation": page.orientation,
        },
        "pdf_dpi": pdf_dpi,
    }


def _page_of(arguments: Mapping[str, Any]) -> PageInfo:
    page = arguments["page"]
    dpi = page["dpi"]
    return PageInfo(
        index=int(page["index"]),
        width=int(page["width"]),
        height=int(page["height"]),
        dpi=None if dpi is None else (float(dpi[0]), float(dpi[1])),
        orientation=int(page["orientation"]),
    )


def _pdf_pages(arguments: Mapping[str, Any], respond: Respond) -> None:
    count, boxes = read_page_boxes(Path(arguments["path"]), max_pages=int(arguments["max_pages"]))
    respond({"count": count, "boxes": boxes}, ())


def _strips(image: Any) -> Iterator[bytes]:
    for top in range(0, image.height, _STRIP_ROWS):
        rows = min(_STRIP_ROWS, image.height - top)
        yield image.crop(0, top, image.width, rows).write_to_memory()


def _decode_raster(path: Path, image_format: ImageFormat, page: PageInfo, respond: Respond) -> None:
    try:
        sheet = normalise_page(load_raster_page(path, image_format, page.index), page, source_format=image_format)
    except CorruptUpload as refused:
        if "out of memory" in refused.reason:
            raise MemoryError(refused.reason) from refused
        raise
    image = sheet.image
    header = {"width": image.width, "height": image.height, "xres": image.xres, "yres": image.yres}
    respond({**header, "payload_bytes": image.width * image.height * RGB_BYTES}, _strips(image))


def _render_pdf(path: Path, page: PageInfo, pdf_dpi: float, respond: Respond) -> None:
    resolution = pdf_dpi / _MM_PER_INCH  # libvips keeps resolution in pixels per millimetre
    with rendered_page_rows(path, page, pdf_dpi=pdf_dpi) as rows:
        header = {"width": page.width, "height": page.height, "xres": resolution, "yres": resolution}
        respond({**header, "payload_bytes": page.width * page.height * RGB_BYTES}, rows)


def _decode_page(arguments: Mapping[str, Any], respond: Respond) -> None:
    path, image_format, page = Path(arguments["path"]), ImageFormat[arguments["format"]], _page_of(arguments)
    if image_format is ImageFormat.PDF:
        _render_pdf(path, page, float(arguments["pdf_dpi"]), respond)
    else:
        _decode_raster(path, image_format, page, respond)


OPERATIONS: dict[str, Operation] = {PDF_PAGES: _pdf_pages, DECODE_PAGE: _decode_page}
