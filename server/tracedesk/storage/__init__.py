"""Content-addressed file storage: originals by SHA-256, derived folders by name, local folder or S3.

Typical use by the upload service::

    stored = store.put_file(upload_path, expected_sha256=sha256_seen_while_receiving)
    with store.stage_derived(sheet_public_id) as staging:
        write_sheet_files(sheet, staging.path)      # published atomically when the block ends cleanly
    ... then write the database rows ...

`sweep_orphans` removes what no row references. Exceptions derive from `StorageError` and carry `http_status`.
"""

from tracedesk.storage.errors import (
    ChecksumMismatch,
    InvalidStorageName,
    StorageError,
    StorageFull,
    StoredFileCorrupt,
    StoredFileMissing,
)
from tracedesk.storage.factory import StoreSettings, build_store
from tracedesk.storage.hashing import HashingWriter, sha256_of_file, sha256_of_stream
from tracedesk.storage.local import LocalFileStore
from tracedesk.storage.manifest import MANIFEST_NAME, ManifestEntry
from tracedesk.storage.protocol import DerivedEntry, DerivedStaging, FileStore, StoredEntry, StoredObject
from tracedesk.storage.s3 import S3FileStore
from tracedesk.storage.sweep import DEFAULT_GRACE, SweepReport, sweep_orphans

__all__ = [
    "DEFAULT_GRACE",
    "MANIFEST_NAME",
    "ChecksumMismatch",
    "DerivedEntry",
    "DerivedStaging",
    "FileStore",
    "HashingWriter",
    "InvalidStorageName",
    "LocalFileStore",
    "ManifestEntry",
    "S3FileStore",
    "StorageError",
    "StorageFull",
    "StoreSettings",
    "StoredEntry",
    "StoredFileCorrupt",
    "StoredFileMissing",
    "StoredObject",
    "SweepReport",
    "build_store",
    "sha256_of_file",
    "sha256_of_stream",
    "sweep_orphans",
]
