"""Storage failures as exceptions that say what happened to which file and carry an HTTP status for the web layer."""

from __future__ import annotations


class StorageError(Exception):
    """A file could not be stored, found or read back intact."""

    http_status = 500
    code = "storage_error"


class StoredFileCorrupt(StorageError):
    """A stored file's content no longer matches its SHA-256: the bytes changed after they were written.

    Attributes
    ----------
    key
        The key (expected SHA-256, hex) or derived path that failed verification.
    actual_sha256
        The SHA-256 of the bytes actually read.
    """

    code = "stored_file_corrupt"

    def __init__(self, key: str, actual_sha256: str) -> None:
        super().__init__(
            f"stored file {key} is corrupt: its content hashes to {actual_sha256}; restore it from a backup"
        )
        self.key = key
        self.actual_sha256 = actual_sha256


class StoredFileMissing(StorageError):
    """No stored file (or published derived folder) under that key or name."""

    http_status = 404
    code = "stored_file_missing"


class ChecksumMismatch(StorageError):
    """The file given to `put_file` does not hash to the SHA-256 the caller said it would."""

    http_status = 422
    code = "checksum_mismatch"


class StorageFull(StorageError):
    """The disk (or quota) is full; nothing partial was left behind."""

    http_status = 507
    code = "storage_full"


class InvalidStorageName(StorageError, ValueError):
    """A key that is not 64 lowercase hex digits, or a derived name or path that could escape its folder."""

    http_status = 400
    code = "invalid_storage_name"
