"""Which of the four accepted formats a file is, told from its first bytes, never from its name.

The file name and the media type the browser sent are only claims: if either names a different type than the
magic bytes show, the upload is refused, because a file that is one thing by its name and another by its
content is how polyglot attacks get through. A raster file whose first KiB also carries a PDF header, HTML,
SVG, script or PostScript markers is refused for the same reason (PDF readers look for ``%PDF-`` anywhere in
the first 1024 bytes; browsers sniff markup in the first 512).
"""

from __future__ import annotations

import enum
from pathlib import PurePath

from tracedesk.imaging.errors import UnsupportedFileType

#: Bytes read from the start of a file to decide its type and to look for polyglot markers.
HEAD_BYTES = 1024
#: Bytes read from the end of a raster file: a ZIP directory ends within its last 64 KiB + 22 bytes (the
#: end-of-central-directory record and its comment, PKWARE APPNOTE sec. 4.3.16, from memory).
TAIL_BYTES = 65_557
_ZIP_END_RECORD = b"PK\x05\x06"

ACCEPTED_SUMMARY = "upload PNG, JPEG, TIFF or PDF"


class ImageFormat(enum.StrEnum):
    """The accepted upload formats; the value is the short name used in messages and metadata."""

    PNG = "png"
    JPEG = "jpeg"
    TIFF = "tiff"
    PDF = "pdf"

    @property
    def media_type(self) -> str:
        """The IANA media type of the format."""
        return _MEDIA_TYPES[self]


_MEDIA_TYPES = {
    ImageFormat.PNG: "image/png",
    ImageFormat.JPEG: "image/jpeg",
    ImageFormat.TIFF: "image/tiff",
    ImageFormat.PDF: "application/pdf",
}

# Longest signatures first is not needed: no accepted signature is a prefix of another.
_SIGNATURES: tuple[tuple[bytes, ImageFormat], ...] = (
    (b"\x89PNG\r\n\x1a\n", ImageFormat.PNG),
    (b"\xff\xd8\xff", ImageFormat.JPEG),
    (b"II*\x00", ImageFormat.TIFF),
    (b"MM\x00*", ImageFormat.TIFF),
    (b"II+\x00", ImageFormat.TIFF),  # BigTIFF, little-endian
    (b"MM\x00+", ImageFormat.TIFF),  # BigTIFF, big-endian
    (b"%PDF-", ImageFormat.PDF),
)

_EXTENSIONS = {
    ".png": ImageFormat.PNG,
    ".jpg": ImageFormat.JPEG,
    ".jpeg": ImageFormat.JPEG,
    ".jpe": ImageFormat.JPEG,
    ".jfif": ImageFormat.JPEG,
    ".tif": ImageFormat.TIFF,
    ".tiff": ImageFormat.TIFF,
    ".pdf": ImageFormat.PDF,
}

_MEDIA_TYPE_ALIASES = {
    "image/png": ImageFormat.PNG,
    "image/jpeg": ImageFormat.JPEG,
    "image/jpg": ImageFormat.JPEG,
    "image/pjpeg": ImageFormat.JPEG,
    "image/tiff": ImageFormat.TIFF,
    "image/tiff-fx": ImageFormat.TIFF,
    "application/pdf": ImageFormat.PDF,
    "application/x-pdf": ImageFormat.PDF,
}

#: Media types that say nothing about the content; a browser sends them for unknown extensions.
_UNINFORMATIVE_MEDIA_TYPES = frozenset({"", "application/octet-stream", "binary/octet-stream"})

# Recognised so the refusal can say what the file is; the order matters only for overlapping markers.
_KNOWN_OTHER_TYPES: tuple[tuple[bytes, str], ...] = (
    (b"GIF87a", "a GIF image"),
    (b"GIF89a", "a GIF image"),
    (b"BM", "a BMP image"),
    (b"RIFF", "a RIFF container (WebP, AVI or WAV)"),
    (b"\x00\x00\x00\x0cjP  ", "a JPEG 2000 image"),
    (b"\xc5\xd0\xd3\xc6", "an EPS (PostScript) file"),
    (b"%!PS", "a PostScript or EPS file"),
    (b"PK\x03\x04", "a ZIP archive (or an office document)"),
    (b"\x1f\x8b", "a gzip archive"),
    (b"8BPS", "a Photoshop document"),
    (b"\x00\x00\x01\x00", "a Windows icon"),
)

# Markers that make another parser take the file for something else (case-insensitive).
_POLYGLOT_MARKERS: tuple[tuple[bytes, str], ...] = (
    (b"%pdf-", "a PDF header"),
    (b"<html", "HTML markup"),
    (b"<!doctype html", "HTML markup"),
    (b"<script", "a script tag"),
    (b"<svg", "SVG markup"),
    (b"%!ps", "a PostScript header"),
)


def sniff_format(head: bytes) -> ImageFormat | None:
    """The accepted format whose signature starts `head`, or None if no accepted signature matches."""
    for signature, image_format in _SIGNATURES:
        if head.startswith(signature):
            return image_format
    return None


def format_from_name(file_name: str) -> ImageFormat | None:
    """The format a file name's extension claims; None when the name has no extension.

    Raises
    ------
    UnsupportedFileType
        The extension names a type we do not accept (``.svg``, ``.html``, ``.eps``, ``.gif`` ...).
    """
    suffix = PurePath(file_name.replace("\\", "/")).suffix.lower()
    if not suffix:
        return None
    if suffix not in _EXTENSIONS:
        raise UnsupportedFileType(f"files ending in {suffix!r} are not accepted; {ACCEPTED_SUMMARY}")
    return _EXTENSIONS[suffix]


def format_from_media_type(media_type: str) -> ImageFormat | None:
    """The format a declared media type claims; None for an uninformative one (``application/octet-stream``).

    Raises
    ------
    UnsupportedFileType
        The media type names a type we do not accept (``image/svg+xml``, ``text/html`` ...).
    """
    essence = media_type.split(";", 1)[0].strip().lower()
    if essence in _UNINFORMATIVE_MEDIA_TYPES:
        return None
    if essence not in _MEDIA_TYPE_ALIASES:
        raise UnsupportedFileType(f"files of type {essence!r} are not accepted; {ACCEPTED_SUMMARY}")
    return _MEDIA_TYPE_ALIASES[essence]


def describe_content(head: bytes) -> str:
    """A short description of what an unaccepted file looks like, for the refusal message."""
    if not head:
        return "an empty file"
    for signature, description in _KNOWN_OTHER_TYPES:
        if head.startswith(signature):
            return description
    text = head.lstrip(b"\xef\xbb\xbf \t\r\n").lower()
    if text.startswith((b"<?xml", b"<svg")) and b"<svg" in text:
        return "an SVG image"
    if text.startswith((b"<!doctype html", b"<html", b"<head", b"<body", b"<script")):
        return "an HTML document"
    if text.startswith(b"<"):
        return "an XML or HTML document"
    return "not a PNG, JPEG, TIFF or PDF file"


def find_polyglot_marker(head: bytes) -> str | None:
    """The first marker in `head` that another parser would act on, or None."""
    lowered = head.lower()
    for marker, description in _POLYGLOT_MARKERS:
        if marker in lowered:
            return description
    return None


def _ends_with_zip_directory(tail: bytes) -> bool:
    start = tail.rfind(_ZIP_END_RECORD)
    while start >= 0:
        comment_length = int.from_bytes(tail[start + 20 : start + 22], "little")
        if start + 22 + comment_length == len(tail):
            return True
        start = tail.rfind(_ZIP_END_RECORD, 0, start)
    return False


def find_trailing_polyglot(tail: bytes) -> str | None:
    """What another format appended to a raster file's end looks like (a ZIP archive, markup, a PDF), or None.

    ZIP readers start from the end-of-central-directory record at the file's end, so an image with a ZIP
    appended opens as an archive too; the record counts only where its comment length makes it end exactly at
    the end of the file, so compressed pixel data that happens to contain the 4-byte signature passes.
    """
    if _ends_with_zip_directory(tail):
        return "a ZIP archive at its end"
    marker = find_polyglot_marker(tail[-HEAD_BYTES:])
    if marker is None and b"%%eof" in tail[-HEAD_BYTES:].lower():
        marker = "a PDF trailer"
    return f"{marker} at its end" if marker else None


def identify_format(
    head: bytes, *, declared_name: str | None = None, declared_media_type: str | None = None
) -> ImageFormat:
    """Decide an upload's format from its first bytes and check the declared name and media type agree.

    Parameters
    ----------
    head
        The first `HEAD_BYTES` bytes of the file (fewer if the file is shorter).
    declared_name
        The file name the user sent, if any; only its extension is used.
    declared_media_type
        The Content-Type the browser sent for the file, if any.

    Raises
    ------
    UnsupportedFileType
        Unknown content, a declared type we do not accept, a declared type that disagrees with the content,
        or a raster file that also carries markers of another format.
    """
    found = sniff_format(head)
    if found is None:
        raise UnsupportedFileType(f"the file is {describe_content(head)}; {ACCEPTED_SUMMARY}")
    claims = {
        "file name": format_from_name(declared_name) if declared_name else None,
        "declared media type": format_from_media_type(declared_media_type) if declared_media_type else None,
    }
    for source, claimed in claims.items():
        if claimed is not None and claimed is not found:
            raise UnsupportedFileType(
                f"the content is {found.name} but the {source} says {claimed.name}; a file must be what its name says"
            )
    marker = find_polyglot_marker(head[:HEAD_BYTES]) if found is not ImageFormat.PDF else None
    if marker is not None:
        raise UnsupportedFileType(
            f"the {found.name} file also contains {marker} near its start, so other programs could read it "
            "as a different type; re-save it as a plain image"
        )
    return found
