"""Every sheet becomes one 8-bit sRGB image with its orientation applied, stored as an uncompressed TIFF.

Normalisation: EXIF orientation applied (the header's tag, see `PageInfo.orientation`), alpha flattened on
white, 16-bit samples scaled to 8 bits (the high byte, value >> 8, as libvips does), greyscale, palette and
bilevel expanded to RGB, CMYK converted through libvips' built-in CMYK profile; the resolution (dpi) is kept.
Embedded ICC profiles are not applied: pixel values stay as the scanner wrote them.

Why an uncompressed, striped TIFF written by libvips (measured on this project's 2-core machines, 7000 x 5000
RGB scan with sensor-like noise, 105 MB of pixels; bench/bench_ingest.py re-measures the write):

========================  =========  ==========================  =========
format                    write (s)  load to numpy uint8 (s)     size (MB)
========================  =========  ==========================  =========
TIFF, no compression      0.07       0.15                        105
TIFF, deflate level 1     0.78-0.91  0.62-0.70                   59
TIFF, LZW                 2.15       0.82-0.91                   49
PNG, compression 0        0.09       0.18                        105
PNG, compression 1        0.70       0.55                        56
========================  =========  ==========================  =========

Scans are noisy, so even fast compression only halves the size while it costs about 0.8 s of a 3 s ingest
budget and 0.5 s on every load by the tracing code. The normalised image is a derived file (the original is
kept byte for byte and can regenerate it), so disk is traded for speed; `compression="deflate"` is available
for deployments that prefer the disk.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

import numpy as np
import pyvips
from numpy.typing import NDArray

from tracedesk.imaging.decode import PageInfo, describe_vips_error
from tracedesk.imaging.errors import CorruptUpload, UnsupportedImageVariant
from tracedesk.imaging.formats import ImageFormat

_MM_PER_INCH = 25.4
_SAMPLE_MAXIMA = {"uchar": 255, "ushort": 65535}
# EXIF orientation -> the libvips operations that display the image upright (checked against Pillow's
# ImageOps.exif_transpose in tests/imaging/test_normalise.py).
_ORIENTATION_STEPS: dict[int, tuple[tuple[str, tuple[str, ...]], ...]] = {
    1: (),
    2: (("fliphor", ()),),
    3: (("rot", ("d180",)),),
    4: (("flipver", ()),),
    5: (("rot", ("d90",)), ("fliphor", ())),
    6: (("rot", ("d90",)),),
    7: (("rot", ("d270",)), ("fliphor", ())),
    8: (("rot", ("d270",)),),
}
# Header fields every libvips image has; everything else (EXIF, orientation, ICC, XMP) is dropped so that no
# later operation re-applies an orientation and no derived file leaks scanner metadata.
_CORE_FIELDS = frozenset(
    {"width", "height", "bands", "format", "coding", "interpretation", "xoffset", "yoffset", "xres", "yres"}
)
# Interpretations libvips converts to 8-bit sRGB by itself.
_CONVERTIBLE = frozenset({"b-w", "grey16", "rgb16", "cmyk", "lab", "labs", "labq", "lch", "xyz", "scrgb", "hsv"})


@dataclass(frozen=True, slots=True)
class NormalisedSheet:
    """One sheet's normalised pixels, held in memory, with what the rest of the pipeline needs to know.

    Attributes
    ----------
    page_index
        Zero-based page (TIFF frame, PDF page) within the uploaded file.
    image
        A `pyvips.Image`: 3 bands, 8-bit sRGB, orientation applied, computed into memory.
    dpi
        Horizontal and vertical resolution in dots per inch, or None if the file did not say.
    source_format
        The upload's format.
    """

    page_index: int
    image: Any
    dpi: tuple[float, float] | None
    source_format: ImageFormat

    @property
    def width(self) -> int:
        """Width in pixels."""
        return int(self.image.width)

    @property
    def height(self) -> int:
        """Height in pixels."""
        return int(self.image.height)


def apply_orientation(image: Any, orientation: int) -> Any:
    """Rotate or mirror a `pyvips.Image` so that an EXIF `orientation` (1-8) displays upright."""
    for operation, arguments in _ORIENTATION_STEPS.get(orientation, ()):
        image = getattr(image, operation)(*arguments)
    return image


def _without_metadata(image: Any) -> Any:
    extra = [field for field in image.get_fields() if field not in _CORE_FIELDS]
    if not extra:
        return image
    image = image.copy()
    for field in extra:
        image.remove(field)
    return image


def _flatten_alpha(image: Any) -> Any:
    if not image.hasalpha():
        return image
    white = _SAMPLE_MAXIMA[image.format]
    return image.flatten(background=[white] * (image.bands - 1))


def _tag_plain_bands(image: Any) -> Any:
    # Some TIFF writers leave the photometric interpretation vague ("multiband"); name it by band count.
    sixteen = image.format == "ushort"
    if image.bands == 1:
        return image.copy(interpretation="grey16" if sixteen else "b-w")
    if image.bands == 3:
        return image.copy(interpretation="rgb16" if sixteen else "srgb")
    raise UnsupportedImageVariant(f"images with {image.bands} colour channels are not supported")


def to_srgb8(image: Any) -> Any:
    """Convert a decoded `pyvips.Image` to 3-band 8-bit sRGB (alpha flattened on white).

    Raises
    ------
    UnsupportedImageVariant
        Samples other than 8 or 16-bit unsigned integers, or an unusual channel layout.
    """
    if image.format not in _SAMPLE_MAXIMA:
        raise UnsupportedImageVariant(
            f"images with {image.format} samples are not supported; save the scan with 8 or 16-bit channels"
        )
    image = _flatten_alpha(image)
    if image.interpretation == "srgb" and image.format == "uchar" and image.bands == 3:
        return image
    if image.interpretation not in _CONVERTIBLE and image.interpretation != "srgb":
        image = _tag_plain_bands(image)
    if image.interpretation == "srgb" and image.format == "ushort":
        image = image.copy(interpretation="rgb16")
    image = image.colourspace("srgb")
    if image.bands != 3 or image.format != "uchar":
        raise UnsupportedImageVariant("the image could not be converted to 8-bit RGB")
    return image


def normalise_page(image: Any, page: PageInfo, *, source_format: ImageFormat) -> NormalisedSheet:
    """Orient, convert to 8-bit sRGB and compute one decoded page into memory.

    Parameters
    ----------
    image
        A lazily decoded `pyvips.Image` (from `decode.load_raster_page` or a rendered PDF page).
    page
        What the header said about this page; its orientation is applied and its size is checked.
    source_format
        The upload's format, kept as metadata.

    Raises
    ------
    CorruptUpload
        The pixels could not be decoded (truncated or damaged data), or their size disagrees with the header.
    UnsupportedImageVariant
        See `to_srgb8`.
    """
    try:
        upright = to_srgb8(apply_orientation(image, page.orientation))
        in_memory = _without_metadata(upright.copy_memory())
    except pyvips.Error as exc:
        raise CorruptUpload(
            f"page {page.index + 1} of the {source_format.name} file cannot be decoded: {describe_vips_error(exc)}"
        ) from exc
    if (in_memory.width, in_memory.height) != (page.width, page.height):
        raise CorruptUpload(
            f"page {page.index + 1} decodes to {in_memory.width} x {in_memory.height} pixels but its header "
            f"says {page.width} x {page.height}"
        )
    return NormalisedSheet(page_index=page.index, image=in_memory, dpi=page.dpi, source_format=source_format)


def save_normalised(sheet: NormalisedSheet, path: Path, *, compression: Literal["none", "deflate"] = "none") -> Path:
    """Write the sheet's pixels as a striped TIFF (8-bit RGB) with its resolution when known.

    Parameters
    ----------
    sheet
        The normalised sheet.
    path
        Destination file (``.tif``); its folder must exist.
    compression
        ``"none"`` (default, fastest to write and to load) or ``"deflate"`` (level 1, horizontal predictor;
        about half the size on scans).
    """
    options: dict[str, Any] = {"compression": compression, "keep": "none"}
    if compression == "deflate":
        options.update(level=1, predictor="horizontal")
    image = sheet.image
    if sheet.dpi is not None:
        image = image.copy(xres=sheet.dpi[0] / _MM_PER_INCH, yres=sheet.dpi[1] / _MM_PER_INCH)
        options["resunit"] = "inch"
    image.tiffsave(str(path), **options)
    return path


def load_normalised(path: Path) -> NDArray[np.uint8]:
    """Load a normalised sheet image as a writable numpy array of shape (height, width, 3), dtype uint8.

    Row j, column i of the array is the pixel covering [i, i + 1) x [j, j + 1) in sheet coordinates.

    Raises
    ------
    ValueError
        The file is not an 8-bit, 3-band image (not written by `save_normalised`).
    """
    image = pyvips.Image.tiffload(str(path), revalidate=True)
    if image.bands != 3 or image.format != "uchar":
        raise ValueError(f"{path} is not a normalised sheet image (bands={image.bands}, format={image.format})")
    array: NDArray[np.uint8] = image.numpy()
    return array
