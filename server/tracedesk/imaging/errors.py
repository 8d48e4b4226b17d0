"""Why an upload was refused, as exceptions that carry the HTTP status the web layer should answer with.

Every refusal names the problem in `reason`, in words a user can act on ("the file is a GIF image; upload PNG,
JPEG, TIFF or PDF"). Nothing here imports web code: the API layer maps `http_status` and `code` to a response.
"""

from __future__ import annotations


class UploadRefused(Exception):
    """An uploaded file that Tracedesk will not turn into sheets.

    Parameters
    ----------
    reason
        A sentence for the user naming what is wrong with the file.
    """

    http_status = 422
    code = "upload_refused"

    def __init__(self, reason: str) -> None:
        super().__init__(reason)
        self.reason = reason


class UnsupportedFileType(UploadRefused):
    """The content is not PNG, JPEG, TIFF or PDF, or it does not match the type the upload declared."""

    http_status = 415
    code = "unsupported_file_type"


class UploadTooLarge(UploadRefused):
    """A size cap was exceeded (bytes, pixels, page box or page count); 413 Content Too Large."""

    http_status = 413
    code = "upload_too_large"


class FileTooLarge(UploadTooLarge):
    """More bytes than the configured maximum file size."""

    code = "file_too_large"


class TooManyPixels(UploadTooLarge):
    """A page (image, TIFF frame or rendered PDF page) would exceed the pixel or side-length cap."""

    code = "too_many_pixels"


class TooManyPages(UploadTooLarge):
    """More TIFF frames or PDF pages than the configured maximum."""

    code = "too_many_pages"


class CorruptUpload(UploadRefused):
    """The declared type matches but the content is empty, truncated, damaged or cannot be decoded."""

    http_status = 422
    code = "corrupt_upload"


class EncryptedDocument(CorruptUpload):
    """A password-protected PDF: we cannot render it without the password."""

    code = "encrypted_document"


class UnsupportedImageVariant(UploadRefused):
    """An accepted format holding pixels we do not convert (e.g. 32-bit float or signed TIFF samples)."""

    http_status = 422
    code = "unsupported_image_variant"


class DecodeTimeLimit(UploadRefused):
    """Decoding a page (or reading a PDF's page list) took longer than the configured time limit.

    422: the file is not too large in any declared sense, but it cannot be processed within the limits; a file
    built to be slow (a PDF page redrawing itself millions of times) ends here.
    """

    http_status = 422
    code = "decode_time_limit"


class FileDecodeTimeLimit(DecodeTimeLimit):
    """Decoding the pages of one file took longer, all together, than the file's time budget.

    Each page may be within its own limit: a file of hundreds of slow pages would otherwise hold a decoder for
    hours. The reason names the page being decoded when the budget ran out.
    """

    code = "file_decode_time_limit"


class DecodeMemoryLimit(UploadTooLarge):
    """Decoding a page needed more memory than the decoder process is allowed (a decompression bomb)."""

    code = "decode_memory_limit"


class DecoderStopped(CorruptUpload):
    """The decoder process stopped abnormally on the file without a sign of running out of memory."""

    code = "decoder_stopped"


def _with_subclasses(kind: type[UploadRefused]) -> list[type[UploadRefused]]:
    return [kind, *(sub for child in kind.__subclasses__() for sub in _with_subclasses(child))]


def refusal_for(code: str, reason: str) -> UploadRefused:
    """The refusal of class `code` (an `UploadRefused.code`) with `reason`, as a decoder process reported it.

    Raises
    ------
    KeyError
        No refusal class has that code.
    """
    by_code = {kind.code: kind for kind in _with_subclasses(UploadRefused)}
    return by_code[code](reason)
