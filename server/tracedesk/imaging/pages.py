"""An upload's pages: examined cheaply first (type, size, headers, caps), then decoded one sheet at a time.

`examine_upload` refuses a bad file before any pixel is decoded: zero bytes, over the byte cap, unknown or
mismatched type, a header claiming too many pixels, too many TIFF frames or PDF pages, a PDF page box too
large to render. `iter_sheets` then yields one `NormalisedSheet` per page (every TIFF frame, every PDF page)
and may still refuse a page whose data turns out to be truncated or damaged; callers must treat the whole
upload as refused then and discard the sheets already produced.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

from tracedesk.imaging.decode import PageInfo, load_raster_page, survey_raster
from tracedesk.imaging.errors import CorruptUpload, FileTooLarge, UnsupportedFileType
from tracedesk.imaging.formats import HEAD_BYTES, TAIL_BYTES, ImageFormat, find_trailing_polyglot, identify_format
from tracedesk.imaging.limits import DEFAULT_LIMITS, DEFAULT_PDF_DPI, DecodeLimits, check_pdf_dpi
from tracedesk.imaging.normalise import NormalisedSheet, normalise_page
from tracedesk.imaging.pdf import render_pdf_page, survey_pdf


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
    """

    path: Path
    image_format: ImageFormat
    size_bytes: int
    pages: tuple[PageInfo, ...]
    pdf_dpi: float | None

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
    )


def decode_sheet(info: UploadInfo, page: PageInfo) -> NormalisedSheet:
    """Decode and normalise one examined page into memory.

    Raises
    ------
    CorruptUpload, UnsupportedImageVariant
        The page's data is truncated or damaged, or holds pixels we do not convert.
    """
    if info.image_format is ImageFormat.PDF:
        image = render_pdf_page(info.path, page, pdf_dpi=info.pdf_dpi or DEFAULT_PDF_DPI)
    else:
        image = load_raster_page(info.path, info.image_format, page.index)
    return normalise_page(image, page, source_format=info.image_format)


def iter_sheets(info: UploadInfo) -> Iterator[NormalisedSheet]:
    """Yield the normalised sheet of every page of an examined upload, one at a time, in file order.

    Only one decoded page is held at a time (a 7000 x 5000 page is 105 MB).
    """
    for page in info.pages:
        yield decode_sheet(info, page)
