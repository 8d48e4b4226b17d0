"""Safe decoding of PNG, JPEG and TIFF: Pillow reads the headers, libvips decodes the pixels.

Two steps, each with the intended decoder only:

1. *Header survey with Pillow* (`survey_raster`): `Image.open(..., formats=[<the sniffed format>])` parses only
   the header, so a 100 000 x 100 000 PNG costs a few hundred bytes of reading. Pillow's decompression-bomb check
   runs there with `Image.MAX_IMAGE_PIXELS` set explicitly (to `PILLOW_PIXEL_CEILING`) and its
   `DecompressionBombWarning` turned into an error inside a local `warnings.catch_warnings()` block; our own,
   lower per-page cap is then checked explicitly, because the warning filter is process state that another
   thread's `catch_warnings` can briefly swap out. TIFF frames are counted by seeking one IFD at a time and
   stopping at cap + 1, so a 10 000-frame file is refused after reading 501 small IFDs.
2. *Pixel decode with libvips* (`load_raster_page`): the format's own loader (`pngload`, `jpegload`,
   `tiffload`), never the sniffing `new_from_file`, with `fail_on="error"` so truncated or damaged data is an
   error rather than a grey band, and untrusted loaders blocked. Measured on a 7000 x 5000 scan (bench/
   bench_ingest.py): libvips decodes PNG and JPEG about 1.3-1.6x faster than Pillow and does not hold RGB at
   4 bytes a pixel, and the decoded image feeds the pyramid writer directly.

`ImageFile.LOAD_TRUNCATED_IMAGES` plays no part: Pillow never decodes pixels here, and libvips is told to fail.
"""

from __future__ import annotations

import math
import struct
import warnings
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

import pyvips
from PIL import Image, JpegImagePlugin, TiffImagePlugin, UnidentifiedImageError

from tracedesk.imaging.errors import CorruptUpload, TooManyPages, TooManyPixels
from tracedesk.imaging.formats import ImageFormat
from tracedesk.imaging.limits import PILLOW_PIXEL_CEILING, DecodeLimits

# Process-wide decoder settings, made explicit once rather than trusting library defaults.
Image.MAX_IMAGE_PIXELS = PILLOW_PIXEL_CEILING
pyvips.block_untrusted_set(True)

_PILLOW_FORMATS = {ImageFormat.PNG: "PNG", ImageFormat.JPEG: "JPEG", ImageFormat.TIFF: "TIFF"}
_VIPS_LOADERS = {ImageFormat.PNG: "pngload", ImageFormat.JPEG: "jpegload", ImageFormat.TIFF: "tiffload"}
# EXIF orientations 5-8 swap width and height (TIFF 6.0 / EXIF 2.3 Orientation tag 274).
_TRANSPOSING_ORIENTATIONS = frozenset({5, 6, 7, 8})
_EXIF_ORIENTATION_TAG = 0x0112
# Exceptions Pillow raises from a malformed header.
_HEADER_ERRORS = (OSError, SyntaxError, ValueError, EOFError, IndexError, KeyError, TypeError, struct.error)


@dataclass(frozen=True, slots=True)
class PageInfo:
    """One page of an upload as its header describes it, before any pixel is decoded.

    Attributes
    ----------
    index
        Zero-based page (TIFF frame, PDF page) number within the file.
    width, height
        Size of the sheet image in pixels, after EXIF orientation is applied.
    dpi
        Horizontal and vertical resolution in dots per inch, after orientation; None if the file does not say.
    orientation
        EXIF orientation (1-8) that normalisation applies; 1 means none.
    """

    index: int
    width: int
    height: int
    dpi: tuple[float, float] | None
    orientation: int = 1


@contextmanager
def _bomb_checks_as_errors() -> Iterator[None]:
    """Turn Pillow's decompression-bomb warning into an exception, only inside the block.

    Pillow's other warnings while parsing a header are about odd metadata (a short EXIF block, a tag with a
    surprising count), common in scanner output; they are silenced here because the pixel decode that follows
    refuses anything actually damaged.
    """
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", category=UserWarning, module=r"PIL\.")
        warnings.simplefilter("error", Image.DecompressionBombWarning)
        yield


def check_page_size(width: int, height: int, *, limits: DecodeLimits, what: str) -> None:
    """Refuse a page whose pixel count or longest side is over the caps, or whose size is empty."""
    if width < 1 or height < 1:
        raise CorruptUpload(f"{what} has an empty size ({width} x {height} pixels)")
    if max(width, height) > limits.max_side_pixels:
        raise TooManyPixels(
            f"{what} is {width} x {height} pixels; the longest accepted side is {limits.max_side_pixels} pixels"
        )
    if width * height > limits.max_pixels_per_page:
        raise TooManyPixels(
            f"{what} is {width} x {height} pixels ({width * height / 1e6:.1f} Mpx); the limit is "
            f"{limits.max_pixels_per_page / 1e6:g} Mpx per page"
        )


def _clean_dpi(value: float) -> float:
    # PNG stores pixels per metre as an integer, so 600 dpi comes back as 599.9988: snap near-integers.
    nearest = round(value)
    return float(nearest) if abs(value - nearest) < 0.01 else round(value, 3)


def _dpi_pair(x_value: Any, y_value: Any, *, per_inch: float = 1.0) -> tuple[float, float] | None:
    try:
        x_dpi, y_dpi = float(x_value) * per_inch, float(y_value) * per_inch
    except (TypeError, ValueError, ZeroDivisionError):
        return None
    if not (math.isfinite(x_dpi) and math.isfinite(y_dpi)) or x_dpi <= 1 or y_dpi <= 1:
        return None  # 0 or 1 means "unknown" in several writers
    return (_clean_dpi(x_dpi), _clean_dpi(y_dpi))


def _header_dpi(info: Mapping[Any, Any]) -> tuple[float, float] | None:
    dpi = info.get("dpi")
    if not isinstance(dpi, tuple) or len(dpi) != 2:
        return None
    return _dpi_pair(dpi[0], dpi[1])


def _jpeg_dpi(image: Image.Image) -> tuple[float, float] | None:
    # Pillow answers 72 dpi for a JPEG whose EXIF block has no resolution; a scan's resolution must not be
    # invented, so read the JFIF density (unit 1 = per inch, 2 = per cm) and else the EXIF tags 282/283 with
    # unit tag 296 (2 = inch, 3 = cm) ourselves (JFIF 1.02; EXIF 2.3; from memory).
    unit, density = image.info.get("jfif_unit"), image.info.get("jfif_density")
    if unit in (1, 2) and isinstance(density, tuple) and len(density) == 2:
        return _dpi_pair(density[0], density[1], per_inch=1.0 if unit == 1 else 2.54)
    exif = _header_exif(image)
    if exif is None or exif.get(296) not in (2, 3):
        return None
    return _dpi_pair(exif.get(282), exif.get(283), per_inch=1.0 if exif.get(296) == 2 else 2.54)


def _header_exif(image: Image.Image) -> Image.Exif | None:
    raw = image.info.get("exif")
    if not isinstance(raw, bytes):
        return None
    exif = Image.Exif()
    try:
        exif.load(raw)
    except _HEADER_ERRORS:
        return None  # damaged EXIF is metadata, not pixels: read the image as stored
    return exif


def _header_orientation(image: Image.Image) -> int:
    # Read the tag from what the header parse already holds: Pillow's getexif() on a PNG whose eXIf chunk
    # follows the pixel data would decode every pixel just to look for it.
    if isinstance(image, TiffImagePlugin.TiffImageFile):
        value = image.tag_v2.get(_EXIF_ORIENTATION_TAG, 1)
    else:
        exif = _header_exif(image)
        value = 1 if exif is None else exif.get(_EXIF_ORIENTATION_TAG, 1)
    return value if isinstance(value, int) and 1 <= value <= 8 else 1


def _stored_size(image: Image.Image) -> tuple[int, int]:
    # Pillow reports a TIFF's size already transposed for orientations 5-8; we apply orientation ourselves,
    # so we need the size of the pixel data as stored (TIFF 6.0 tags 256 ImageWidth and 257 ImageLength).
    if isinstance(image, TiffImagePlugin.TiffImageFile):
        return int(image.tag_v2[256]), int(image.tag_v2[257])
    return image.size


def _frame_info(image: Image.Image, index: int, *, limits: DecodeLimits, what: str) -> PageInfo:
    width, height = _stored_size(image)
    check_page_size(width, height, limits=limits, what=what)
    orientation = _header_orientation(image)
    dpi = _jpeg_dpi(image) if isinstance(image, JpegImagePlugin.JpegImageFile) else _header_dpi(image.info)
    if orientation in _TRANSPOSING_ORIENTATIONS:
        width, height = height, width
        dpi = None if dpi is None else (dpi[1], dpi[0])
    return PageInfo(index=index, width=width, height=height, dpi=dpi, orientation=orientation)


def _survey_frames(image: Image.Image, image_format: ImageFormat, *, limits: DecodeLimits) -> list[PageInfo]:
    pages = [_frame_info(image, 0, limits=limits, what=f"the {image_format.name} image")]
    if image_format is not ImageFormat.TIFF:
        return pages  # APNG frames and MPO extra pictures are not sheets: the primary image is.
    for index in range(1, limits.max_pages + 1):
        try:
            image.seek(index)
        except EOFError:
            return pages
        pages.append(_frame_info(image, index, limits=limits, what=f"TIFF frame {index + 1}"))
    raise TooManyPages(f"the TIFF file has more than {limits.max_pages} frames; the limit is {limits.max_pages}")


def _open_header(stream: IO[bytes], image_format: ImageFormat) -> Image.Image:
    try:
        return Image.open(stream, formats=[_PILLOW_FORMATS[image_format]])
    except (Image.DecompressionBombError, Image.DecompressionBombWarning) as exc:
        raise TooManyPixels(f"the {image_format.name} header declares too many pixels ({exc})") from exc
    except UnidentifiedImageError as exc:
        raise CorruptUpload(f"the {image_format.name} header is damaged and cannot be read") from exc


def survey_raster(path: Path, image_format: ImageFormat, *, limits: DecodeLimits) -> list[PageInfo]:
    """Read the header(s) of a PNG, JPEG or TIFF file and check every page against the caps.

    Raises
    ------
    TooManyPixels, TooManyPages
        A page is over the pixel or side cap, or a TIFF has more frames than `limits.max_pages`.
    CorruptUpload
        The header is damaged.
    """
    with path.open("rb") as stream, _bomb_checks_as_errors():
        try:
            with _open_header(stream, image_format) as image:
                return _survey_frames(image, image_format, limits=limits)
        except (Image.DecompressionBombError, Image.DecompressionBombWarning) as exc:
            raise TooManyPixels(f"a {image_format.name} frame declares too many pixels ({exc})") from exc
        except _HEADER_ERRORS as exc:
            raise CorruptUpload(f"the {image_format.name} header is damaged: {exc}") from exc


def load_raster_page(path: Path, image_format: ImageFormat, page_index: int) -> Any:
    """Open one page with the format's own libvips loader, set to fail on damaged or truncated data.

    The returned `pyvips.Image` is lazy: decoding errors surface when its pixels are computed, which
    `tracedesk.imaging.normalise.normalise_page` does inside its own error handling.
    """
    loader = getattr(pyvips.Image, _VIPS_LOADERS[image_format])
    options: dict[str, Any] = {"fail_on": "error", "revalidate": True}
    if image_format is ImageFormat.TIFF:
        options["page"] = page_index
    try:
        return loader(str(path), **options)
    except pyvips.Error as exc:
        raise CorruptUpload(f"the {image_format.name} file cannot be decoded: {describe_vips_error(exc)}") from exc


def describe_vips_error(exc: pyvips.Error) -> str:
    """The useful line of a libvips error (e.g. "premature end of JPEG image"), for a refusal message."""
    # libvips messages are multi-line logs whose second line names the problem.
    lines = [line.strip() for line in str(exc).splitlines() if line.strip()]
    return lines[1] if len(lines) > 1 else (lines[0] if lines else "unknown error")
