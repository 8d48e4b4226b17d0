"""Uploaded scans to sheet images: safe decoding with caps, PDF pages, TIFF frames, orientation, tile pyramid.

Typical use by the upload service::

    info = examine_upload(path, declared_name=name, declared_media_type=content_type, limits=limits)
    for sheet in iter_sheets(info):
        files = write_sheet_files(sheet, staging_folder)

Every refusal is an `UploadRefused` subclass carrying `reason`, `http_status` and `code`. Page lists of PDFs
and every pixel decode run in a decoder process with the limits' time and memory caps (`decoder_process`).
"""

from tracedesk.imaging.decode import PageInfo
from tracedesk.imaging.derivatives import (
    DZI_NAME,
    NORMALISED_NAME,
    THUMBNAIL_NAME,
    TILES_DIR_NAME,
    SheetFiles,
    write_sheet_files,
)
from tracedesk.imaging.errors import (
    CorruptUpload,
    DecodeMemoryLimit,
    DecoderStopped,
    DecodeTimeLimit,
    EncryptedDocument,
    FileDecodeTimeLimit,
    FileTooLarge,
    TooManyPages,
    TooManyPixels,
    UnsupportedFileType,
    UnsupportedImageVariant,
    UploadRefused,
    UploadTooLarge,
)
from tracedesk.imaging.formats import ImageFormat, identify_format, sniff_format
from tracedesk.imaging.limits import DEFAULT_LIMITS, DEFAULT_PDF_DPI, DecodeLimits
from tracedesk.imaging.normalise import NormalisedSheet, load_normalised, save_normalised
from tracedesk.imaging.pages import UploadInfo, decode_sheet, examine_upload, iter_sheets
from tracedesk.imaging.pyramid import PyramidFiles, save_pyramid, save_thumbnail

__all__ = [
    "DEFAULT_LIMITS",
    "DEFAULT_PDF_DPI",
    "DZI_NAME",
    "NORMALISED_NAME",
    "THUMBNAIL_NAME",
    "TILES_DIR_NAME",
    "CorruptUpload",
    "DecodeLimits",
    "DecodeMemoryLimit",
    "DecodeTimeLimit",
    "DecoderStopped",
    "EncryptedDocument",
    "FileDecodeTimeLimit",
    "FileTooLarge",
    "ImageFormat",
    "NormalisedSheet",
    "PageInfo",
    "PyramidFiles",
    "SheetFiles",
    "TooManyPages",
    "TooManyPixels",
    "UnsupportedFileType",
    "UnsupportedImageVariant",
    "UploadInfo",
    "UploadRefused",
    "UploadTooLarge",
    "decode_sheet",
    "examine_upload",
    "identify_format",
    "iter_sheets",
    "load_normalised",
    "save_normalised",
    "save_pyramid",
    "save_thumbnail",
    "sniff_format",
    "write_sheet_files",
]
