"""An upload's pages: examined cheaply first (type, size, headers, caps), then decoded one sheet at a time.

`examine_upload` refuses a bad file before any pixel is decoded: zero bytes, over the byte cap, unknown or
mismatched type, a header claiming too many pixels, too many TIFF frames or PDF pages, a PDF page box too
large to render. `iter_sheets` then yields one `NormalisedSheet` per page (every TIFF frame, every PDF page)
and may still refuse a page whose data turns out to be truncated or damaged, or whose decoding goes past the
time or memory limit; callers must treat the whole upload as refused then and discard the sheets already
produced.

Raster headers are read here with Pillow (bounded work: the frame count stops at the cap). Everything else,
PDF page lists and every pixel decode, runs in a decoder process with the upload's time and memory limits
(`tracedesk.imaging.decoder_process`); this process receives each finished page's pixels.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pyvips

from tracedesk.imaging.decode import PageInfo, survey_raster
from tracedesk.imaging.decoder_process import DecoderProcess
from tracedesk.imaging.decoder_tasks import (
    DECODE_PAGE,
    PDF_PAGES,
    RGB_BYTES,
    decode_page_arguments,
    pdf_pages_arguments,
)
from tracedesk.imaging.errors import CorruptUpload, FileTooLarge, TooManyPages, UnsupportedFileType
from tracedesk.imaging.formats import HEAD_BYTES, TAIL_BYTES, ImageFormat, find_trailing_polyglot, identify_format
from tracedesk.imaging.limits import DEFAULT_LIMITS, DEFAULT_PDF_DPI, DecodeLimits, check_pdf_dpi
from tracedesk.imaging.normalise import NormalisedSheet
from tracedesk.imaging.pdf import pdf_page_info


@dataclass(frozen=True, slots=True)
class UploadInfo:
    """What an examined upload holds.

    Attributes
    ----------
    path
        The uploaded file (unchanged).
    image_format
        Its format, from the magic bytes.
    size_bytes
        Its size in bytes.
    pages
        One entry per sheet it will produce, in file order.
    pdf_dpi
        The PDF render resolution the page sizes were computed for (dots per inch); None for raster files.
    limits
        The caps the upload was examined with; decoding its pages keeps to their time and memory limits.
    """

    path: Path
    image_format: ImageFormat
    size_bytes: int
    pages: tuple[PageInfo, ...]
    pdf_dpi: float | None
    limits: DecodeLimits = DEFAULT_LIMITS

    @property
    def page_count(self) -> int:
        """Number of sheets the upload yields."""
        return len(self.pages)

    @property
    def media_type(self) -> str:
        """The media type to record and to serve the original with (from the content, not the claim)."""
        return self.image_format.media_type


def _read_head(path: Path, *, limits: DecodeLimits) -> tuple[bytes, int]:
    size = path.stat().st_size
    if size == 0:
        raise CorruptUpload("the file is empty (0 bytes)")
    if size > limits.max_file_bytes:
        raise FileTooLarge(f"the file is {size / 2**20:.1f} MiB; the limit is {limits.max_file_bytes / 2**20:g} MiB")
    with path.open("rb") as stream:
        return stream.read(HEAD_BYTES), size


def _refuse_appended_content(path: Path, image_format: ImageFormat, size: int) -> None:
    """A raster file with another format appended (PNG + ZIP, JPEG + HTML) is a polyglot: refused like one."""
    with path.open("rb") as stream:
        stream.seek(max(0, size - TAIL_BYTES))
        found = find_trailing_polyglot(stream.read())
    if found is not None:
        raise UnsupportedFileType(
            f"the {image_format.name} file also carries {found}, so other programs could read it as a different "
            "type; re-save it as a plain image"
        )


def survey_pdf(path: Path, *, limits: DecodeLimits, pdf_dpi: float) -> list[PageInfo]:
    """Count the pages of a PDF and check each page's rendered size against the caps, rendering nothing.

    PDFium reads the page list in a decoder process (opening a PDF can inflate compressed object streams).

    Raises
    ------
    TooManyPages
        More pages than `limits.max_pages` (checked before any page box is read).
    TooManyPixels
        A page box would render over the pixel or side cap at `pdf_dpi`.
    CorruptUpload, EncryptedDocument
        The document cannot be opened, has no pages, or is password-protected.
    DecodeTimeLimit, DecodeMemoryLimit, DecoderStopped
        Reading the page list went past the time or memory limit, or stopped the decoder.
    """
    with DecoderProcess(limits) as decoder:
        arguments = pdf_pages_arguments(path, max_pages=limits.max_pages)
        reply = decoder.call(PDF_PAGES, arguments, what="reading the PDF's page list")
    count = int(reply.header["count"])
    if count < 1:
        raise CorruptUpload("the PDF has no pages")
    if count > limits.max_pages:
        raise TooManyPages(f"the PDF has {count} pages; the limit is {limits.max_pages}")
    boxes = [(float(width), float(height)) for width, height in reply.header["boxes"]]
    return [pdf_page_info(index, box, limits=limits, pdf_dpi=pdf_dpi) for index, box in enumerate(boxes)]


def examine_upload(
    path: Path,
    *,
    declared_name: str | None = None,
    declared_media_type: str | None = None,
    limits: DecodeLimits = DEFAULT_LIMITS,
    pdf_dpi: float = DEFAULT_PDF_DPI,
) -> UploadInfo:
    """Check an uploaded file against the accepted types and every cap, decoding headers only.

    Parameters
    ----------
    path
        The uploaded file on local disk.
    declared_name
        The user's file name; its extension must agree with the content. Never used as a path.
    declared_media_type
        The Content-Type sent with the file; must agree with the content unless uninformative.
    limits
        The caps to apply.
    pdf_dpi
        Resolution PDF pages will be rendered at, in dots per inch (36-1200).

    Raises
    ------
    tracedesk.imaging.errors.UploadRefused
        A subclass naming the problem, with the HTTP status to answer with.
    """
    dpi = check_pdf_dpi(pdf_dpi)
    head, size = _read_head(path, limits=limits)
    image_format = identify_format(head, declared_name=declared_name, declared_media_type=declared_media_type)
    if image_format is ImageFormat.PDF:
        pages = survey_pdf(path, limits=limits, pdf_dpi=dpi)
    else:
        _refuse_appended_content(path, image_format, size)
        pages = survey_raster(path, image_format, limits=limits)
    return UploadInfo(
        path=path,
        image_format=image_format,
        size_bytes=size,
        pages=tuple(pages),
        pdf_dpi=dpi if image_format is ImageFormat.PDF else None,
        limits=limits,
    )


def _decode_with(decoder: DecoderProcess, info: UploadInfo, page: PageInfo) -> NormalisedSheet:
    pdf_dpi = (info.pdf_dpi or DEFAULT_PDF_DPI) if info.image_format is ImageFormat.PDF else None
    verb = "rendering" if info.image_format is ImageFormat.PDF else "decoding"
    reply = decoder.call(
        DECODE_PAGE,
        decode_page_arguments(info.path, info.image_format, page, pdf_dpi=pdf_dpi),
        what=f"{verb} page {page.index + 1} of the {info.image_format.name} file",
        max_payload_bytes=page.width * page.height * RGB_BYTES,
    )
    width, height = int(reply.header["width"]), int(reply.header["height"])
    if (width, height) != (page.width, page.height) or len(reply.payload) != width * height * RGB_BYTES:
        raise CorruptUpload(
            f"page {page.index + 1} decodes to {width} x {height} pixels but its header says "
            f"{page.width} x {page.height}"
        )
    image = pyvips.Image.new_from_memory(reply.payload, width, height, RGB_BYTES, "uchar")
    resolution = {"xres": float(reply.header["xres"]), "yres": float(reply.header["yres"])}
    return NormalisedSheet(
        page_index=page.index,
        image=image.copy(interpretation="srgb", **resolution),
        dpi=page.dpi,
        source_format=info.image_format,
    )


def decode_sheet(info: UploadInfo, page: PageInfo) -> NormalisedSheet:
    """Decode and normalise one examined page into memory (in a decoder process of its own).

    Raises
    ------
    CorruptUpload, UnsupportedImageVariant
        The page's data is truncated or damaged, or holds pixels we do not convert.
    DecodeTimeLimit, DecodeMemoryLimit, DecoderStopped
        Decoding went past the upload's time or memory limit, or stopped the decoder.
    """
    with DecoderProcess(info.limits) as decoder:
        return _decode_with(decoder, info, page)


def iter_sheets(info: UploadInfo) -> Iterator[NormalisedSheet]:
    """Yield the normalised sheet of every page of an examined upload, one at a time, in file order.

    One decoder process serves all the pages, so they share the file's decoding budget
    (`DecodeLimits.max_file_decode_seconds`). Only one decoded page is held at a time (a 7000 x 5000 page is
    105 MB). Raises what `decode_sheet` raises, and `FileDecodeTimeLimit` (naming the page it reached) once the
    pages together go past the budget.
    """
    with DecoderProcess(info.limits) as decoder:
        for page in info.pages:
            yield _decode_with(decoder, info, page)
