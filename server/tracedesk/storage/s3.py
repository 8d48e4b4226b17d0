"""Content-addressed file store in an S3-compatible bucket (AWS S3, MinIO, Ceph...), for scale-out.

Object layout under the optional prefix::

    originals/ab/cd/abcd...          one object per SHA-256 key (metadata sha256=<key>)
    derived/<name>/<relative path>   derived files
    derived/<name>/.manifest.json    uploaded last: a folder without it is an interrupted publish

An S3 PUT is atomic (the object appears whole or not at all), and each PUT carries `ChecksumSHA256` so the
server refuses bytes that changed after we hashed them. Reads are streamed into a local spooled temp file while
hashed and handed over only if the hash matches the key (or the manifest, for derived files). Objects are put
whole (up to 5 GB, far above the upload cap), so no multipart upload is ever left dangling.
"""

from __future__ import annotations

import base64
import hashlib
import os
import shutil
import tempfile
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from datetime import datetime
from pathlib import Path
from typing import IO, Any

import boto3
from botocore.exceptions import BotoCoreError, ClientError

from tracedesk.storage.durable import new_temp_path, open_staging, remove_entries_older_than, storage_error_from
from tracedesk.storage.errors import (
    ChecksumMismatch,
    StorageError,
    StoredFileCorrupt,
    StoredFileMissing,
)
from tracedesk.storage.hashing import CHUNK_BYTES, sha256_of_file
from tracedesk.storage.manifest import (
    MANIFEST_NAME,
    ManifestEntry,
    build_manifest,
    manifest_from_bytes,
    manifest_to_bytes,
)
from tracedesk.storage.names import check_derived_name, check_key, check_relative_path, sharded_parts
from tracedesk.storage.protocol import DerivedEntry, DerivedStaging, StoredEntry, StoredObject

_MISSING_CODES = frozenset({"404", "NoSuchKey", "NotFound"})
_SPOOL_BYTES = 8 * 1024 * 1024
_DELETE_BATCH = 1000  # DeleteObjects takes at most 1000 keys
_ERRORS = (ClientError, BotoCoreError)


def _is_missing(exc: Exception) -> bool:
    return isinstance(exc, ClientError) and str(exc.response.get("Error", {}).get("Code")) in _MISSING_CODES


def _checksum_header(hex_digest: str) -> str:
    return base64.b64encode(bytes.fromhex(hex_digest)).decode("ascii")


class S3FileStore:
    """A `FileStore` in an S3-compatible bucket.

    Parameters
    ----------
    bucket
        Bucket name (must exist).
    prefix
        Folder-like prefix for every object, e.g. ``"tracedesk/"``; empty for the bucket root.
    endpoint_url
        For S3-compatible services (``http://minio:9000``); None for AWS.
    client
        A ready boto3 S3 client (tests, custom credentials); built from `endpoint_url` when None.
    staging_dir
        Local folder for staging derived folders and spooling reads; created if missing.
    upload_workers
        Parallel PUTs when publishing a derived folder (a pyramid is hundreds of small tiles).
    """

    def __init__(
        self,
        *,
        bucket: str,
        prefix: str = "",
        endpoint_url: str | None = None,
        client: Any = None,
        staging_dir: Path | None = None,
        upload_workers: int = 16,
    ) -> None:
        self.bucket = bucket
        self.prefix = f"{prefix.strip('/')}/" if prefix.strip("/") else ""
        self._client = client if client is not None else boto3.client("s3", endpoint_url=endpoint_url)
        self.staging_dir = staging_dir or Path(tempfile.gettempdir()) / "tracedesk-s3-staging"
        self.staging_dir.mkdir(parents=True, exist_ok=True)
        self.upload_workers = upload_workers

    # -- object names ------------------------------------------------------------------------------------

    def object_name(self, key: str) -> str:
        """The object name of original `key`."""
        first, second, name = sharded_parts(key)
        return f"{self.prefix}originals/{first}/{second}/{name}"

    def _derived_prefix(self, name: str) -> str:
        return f"{self.prefix}derived/{check_derived_name(name)}/"

    # -- low-level I/O -------------------------------------------------------------------------------------

    def _head(self, object_name: str) -> dict[str, Any] | None:
        try:
            response: dict[str, Any] = self._client.head_object(Bucket=self.bucket, Key=object_name)
        except _ERRORS as exc:
            if _is_missing(exc):
                return None
            raise StorageError(f"object store failed reading {object_name}: {exc}") from exc
        return response

    def _put(self, object_name: str, path: Path, sha256: str) -> None:
        try:
            with path.open("rb") as body:
                self._client.put_object(
                    Bucket=self.bucket,
                    Key=object_name,
                    Body=body,
                    ChecksumSHA256=_checksum_header(sha256),
                    Metadata={"sha256": sha256},
                )
        except _ERRORS as exc:
            raise StorageError(f"object store failed writing {object_name}: {exc}") from exc

    def _download_spooled(self, object_name: str, *, expected_sha256: str | None, label: str) -> IO[bytes]:
        spool: IO[bytes] = tempfile.SpooledTemporaryFile(  # noqa: SIM115 - returned open to the caller
            max_size=_SPOOL_BYTES, mode="w+b", dir=str(self.staging_dir)
        )
        try:
            actual = self._stream_into(object_name, spool, label=label)
            if expected_sha256 is not None and actual != expected_sha256:
                raise StoredFileCorrupt(label, actual)
            spool.seek(0)
        except BaseException:
            spool.close()
            raise
        return spool

    def _stream_into(self, object_name: str, target: IO[bytes], *, label: str) -> str:
        digest = hashlib.sha256()
        try:
            body = self._client.get_object(Bucket=self.bucket, Key=object_name)["Body"]
            while chunk := body.read(CHUNK_BYTES):
                target.write(chunk)
                digest.update(chunk)
        except _ERRORS as exc:
            if _is_missing(exc):
                raise StoredFileMissing(f"no stored file {label}") from exc
            raise StorageError(f"object store failed reading {label}: {exc}") from exc
        except OSError as exc:
            raise storage_error_from(exc, action=f"spooling {label}") from exc
        return digest.hexdigest()

    def _delete_objects(self, object_names: list[str]) -> None:
        for start in range(0, len(object_names), _DELETE_BATCH):
            batch = [{"Key": name} for name in object_names[start : start + _DELETE_BATCH]]
            try:
                self._client.delete_objects(Bucket=self.bucket, Delete={"Objects": batch, "Quiet": True})
            except _ERRORS as exc:
                raise StorageError(f"object store failed deleting objects: {exc}") from exc

    def _list(self, prefix: str, *, delimiter: str | None = None) -> Iterator[dict[str, Any]]:
        options: dict[str, Any] = {"Bucket": self.bucket, "Prefix": prefix}
        if delimiter is not None:
            options["Delimiter"] = delimiter
        try:
            yield from self._client.get_paginator("list_objects_v2").paginate(**options)
        except _ERRORS as exc:
            raise StorageError(f"object store failed listing {prefix}: {exc}") from exc

    # -- originals ---------------------------------------------------------------------------------------

    def put_file(self, source_path: Path, *, expected_sha256: str | None = None) -> StoredObject:
        """Store `source_path` under its SHA-256 (see `LocalFileStore.put_file` for the contract)."""
        size = source_path.stat().st_size
        if expected_sha256 is not None:
            existing = self._existing(check_key(expected_sha256), size)
            if existing is not None:
                return existing
        try:
            digest = sha256_of_file(source_path)
        except OSError as exc:
            raise storage_error_from(exc, action=f"hashing {source_path.name}") from exc
        if expected_sha256 is not None and digest != expected_sha256:
            raise ChecksumMismatch(f"{source_path.name} hashes to {digest}, not {expected_sha256}")
        existing = self._existing(digest, size)
        if existing is None:
            self._put(self.object_name(digest), source_path, digest)
            existing = StoredObject(key=digest, size=size)
        return existing

    def _existing(self, key: str, size: int) -> StoredObject | None:
        object_name = self.object_name(key)
        head = self._head(object_name)
        if head is None or int(head["ContentLength"]) != size:
            return None
        try:
            # Copy onto itself to refresh LastModified, so a concurrent orphan sweep leaves it alone.
            self._client.copy_object(
                Bucket=self.bucket,
                Key=object_name,
                CopySource={"Bucket": self.bucket, "Key": object_name},
                Metadata={"sha256": key},
                MetadataDirective="REPLACE",
            )
        except _ERRORS as exc:
            raise StorageError(f"object store failed refreshing {object_name}: {exc}") from exc
        return StoredObject(key=key, size=size)

    def exists(self, key: str) -> bool:
        """Whether an original is stored under `key`."""
        return self._head(self.object_name(key)) is not None

    def open_verified(self, key: str) -> IO[bytes]:
        """A local spooled copy of an original, positioned at 0, whose bytes hash to `key`."""
        return self._download_spooled(self.object_name(key), expected_sha256=key, label=key)

    def read_verified(self, key: str) -> bytes:
        """The whole content of an original, checked against `key`."""
        with self.open_verified(key) as stream:
            return stream.read()

    def copy_verified(self, key: str, destination: Path) -> Path:
        """Download an original to `destination`, checked against `key` before it appears there."""
        return self._download_to(self.object_name(key), key, destination, label=key)

    def _download_to(self, object_name: str, expected_sha256: str, destination: Path, *, label: str) -> Path:
        temp_path = new_temp_path(destination.parent, suffix=".part")
        try:
            with temp_path.open("wb") as target:
                actual = self._stream_into(object_name, target, label=label)
            if actual != expected_sha256:
                raise StoredFileCorrupt(label, actual)
            os.replace(temp_path, destination)
        except OSError as exc:
            raise storage_error_from(exc, action=f"downloading {label}") from exc
        finally:
            temp_path.unlink(missing_ok=True)
        return destination

    def delete(self, key: str, *, if_older_than: datetime | None = None) -> bool:
        """Remove an original; True if it was removed."""
        object_name = self.object_name(key)
        head = self._head(object_name)
        if head is None or (if_older_than is not None and head["LastModified"] >= if_older_than):
            return False
        self._delete_objects([object_name])
        return True

    def iter_originals(self) -> Iterator[StoredEntry]:
        """Every stored original with size and last write time."""
        for page in self._list(f"{self.prefix}originals/"):
            for item in page.get("Contents", []):
                name = str(item["Key"]).rsplit("/", 1)[-1]
                try:
                    if self.object_name(name) != item["Key"]:
                        continue
                except StorageError:
                    continue
                yield StoredEntry(key=name, size=int(item["Size"]), modified_at=item["LastModified"])

    def iter_keys(self) -> Iterator[str]:
        """Every stored original's key."""
        return (entry.key for entry in self.iter_originals())

    # -- derived folders ---------------------------------------------------------------------------------

    def stage_derived(self, name: str) -> DerivedStaging:
        """Start building derived folder `name` in a local staging folder; publishing uploads it."""
        return open_staging(self.staging_dir, name, publish=self._publish)

    def _publish(self, name: str, staging_path: Path) -> None:
        prefix = self._derived_prefix(name)
        entries = build_manifest(staging_path)
        previous = self._existing_manifest(name)
        if previous is not None:
            # Unpublish first: a failure part-way leaves an unpublished folder, never a manifest that lies.
            self._delete_objects([prefix + MANIFEST_NAME])
        with ThreadPoolExecutor(max_workers=self.upload_workers) as pool:
            uploads = [
                pool.submit(self._put, prefix + relative, staging_path / relative, entry.sha256)
                for relative, entry in entries.items()
            ]
            for upload in uploads:
                upload.result()
        manifest_path = staging_path / MANIFEST_NAME
        manifest_path.write_bytes(manifest_to_bytes(name, entries))
        self._put(prefix + MANIFEST_NAME, manifest_path, sha256_of_file(manifest_path))
        stale = sorted(set(previous or {}) - set(entries))
        self._delete_objects([prefix + relative for relative in stale])
        shutil.rmtree(staging_path, ignore_errors=True)

    def _existing_manifest(self, name: str) -> dict[str, ManifestEntry] | None:
        try:
            return self.derived_manifest(name)
        except StoredFileMissing:
            return None

    def derived_exists(self, name: str) -> bool:
        """Whether derived folder `name` is published (its manifest exists)."""
        return self._head(self._derived_prefix(name) + MANIFEST_NAME) is not None

    def derived_manifest(self, name: str) -> dict[str, ManifestEntry]:
        """Relative path -> size and SHA-256 of each file of published derived folder `name`."""
        object_name = self._derived_prefix(name) + MANIFEST_NAME
        try:
            data = self._client.get_object(Bucket=self.bucket, Key=object_name)["Body"].read()
        except _ERRORS as exc:
            if _is_missing(exc):
                raise StoredFileMissing(f"no published derived folder {name}") from exc
            raise StorageError(f"object store failed reading {object_name}: {exc}") from exc
        return manifest_from_bytes(data)

    def open_derived(self, name: str, relative_path: str, *, verify: bool = False) -> IO[bytes]:
        """A local spooled copy of one derived file; with `verify`, checked against the manifest."""
        object_name = self._derived_prefix(name) + check_relative_path(relative_path)
        label = f"{name}/{relative_path}"
        expected = self._manifest_sha256(name, relative_path) if verify else None
        return self._download_spooled(object_name, expected_sha256=expected, label=label)

    def _manifest_sha256(self, name: str, relative_path: str) -> str:
        entry = self.derived_manifest(name).get(relative_path)
        if entry is None:
            raise StoredFileMissing(f"no derived file {name}/{relative_path}")
        return entry.sha256

    def copy_derived(self, name: str, relative_path: str, destination: Path) -> Path:
        """Download one derived file to `destination`, checked against the manifest."""
        object_name = self._derived_prefix(name) + check_relative_path(relative_path)
        expected = self._manifest_sha256(name, relative_path)
        return self._download_to(object_name, expected, destination, label=f"{name}/{relative_path}")

    def delete_derived(self, name: str, *, if_older_than: datetime | None = None) -> bool:
        """Remove derived folder `name`: the manifest first (unpublishing it at once), then its files."""
        prefix = self._derived_prefix(name)
        object_names = [str(item["Key"]) for page in self._list(prefix) for item in page.get("Contents", [])]
        if not object_names:
            return False
        if if_older_than is not None and self._folder_modified_at(name) >= if_older_than:
            return False
        manifest = prefix + MANIFEST_NAME
        self._delete_objects([manifest])
        self._delete_objects([object_name for object_name in object_names if object_name != manifest])
        return True

    def _folder_modified_at(self, name: str) -> datetime:
        prefix = self._derived_prefix(name)
        head = self._head(prefix + MANIFEST_NAME)
        if head is not None:
            modified: datetime = head["LastModified"]
            return modified
        times: list[datetime] = [
            item["LastModified"] for page in self._list(prefix) for item in page.get("Contents", [])
        ]
        if not times:
            raise StoredFileMissing(f"no derived folder {name}")
        return max(times)

    def iter_derived(self) -> Iterator[DerivedEntry]:
        """Every derived folder, published or interrupted."""
        root = f"{self.prefix}derived/"
        for page in self._list(root, delimiter="/"):
            for common in page.get("CommonPrefixes", []):
                name = str(common["Prefix"])[len(root) :].rstrip("/")
                try:
                    check_derived_name(name)
                    modified_at = self._folder_modified_at(name)
                except StorageError:
                    continue
                yield DerivedEntry(name=name, modified_at=modified_at, published=self.derived_exists(name))

    # -- housekeeping ------------------------------------------------------------------------------------

    def remove_stale_temporaries(self, *, older_than: datetime) -> list[str]:
        """Remove local staging leftovers last written before `older_than`; return their names."""
        return remove_entries_older_than(self.staging_dir, older_than=older_than)
