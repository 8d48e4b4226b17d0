"""Content-addressed file store in a local folder (the embedded default).

Layout under the root::

    originals/ab/cd/abcd...    one file per SHA-256 key, read-only (0440), never rewritten in place
    derived/<name>/...         published derived folders, each with a `.manifest.json`
    tmp/                       temp files and staging folders; same filesystem as the rest, so renames are atomic

Durability: an original is copied into ``tmp/`` while it is hashed, fsynced, renamed into place with
`os.replace`, and its folder fsynced. A derived folder is fsynced file by file, renamed into ``derived/`` in one
step and ``derived/`` fsynced. Replacing an existing derived folder moves the old one aside first, so for a
moment the name is absent (never half-written); derived files can always be rebuilt from the original.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import IO

from tracedesk.storage.durable import (
    fsync_directory,
    fsync_tree,
    make_directories,
    new_temp_path,
    open_staging,
    remove_entries_older_than,
    storage_error_from,
    write_temp_copy,
)
from tracedesk.storage.errors import ChecksumMismatch, StorageError, StoredFileCorrupt, StoredFileMissing
from tracedesk.storage.hashing import sha256_of_stream
from tracedesk.storage.manifest import (
    MANIFEST_NAME,
    ManifestEntry,
    build_manifest,
    manifest_from_bytes,
    manifest_to_bytes,
)
from tracedesk.storage.names import check_derived_name, check_key, check_relative_path, sharded_parts
from tracedesk.storage.protocol import DerivedEntry, DerivedStaging, StoredEntry, StoredObject

_ORIGINAL_MODE = 0o440


def _modified_at(path: Path) -> datetime:
    return datetime.fromtimestamp(path.stat().st_mtime, tz=UTC)


def _open_checked(path: Path, expected_sha256: str, *, label: str) -> IO[bytes]:
    try:
        stream = path.open("rb")
    except FileNotFoundError as exc:
        raise StoredFileMissing(f"no stored file {label}") from exc
    try:
        actual, _size = sha256_of_stream(stream)
        if actual != expected_sha256:
            raise StoredFileCorrupt(label, actual)
        stream.seek(0)
    except BaseException:
        stream.close()
        raise
    return stream


class LocalFileStore:
    """A `FileStore` in a local folder.

    Parameters
    ----------
    root
        The store's folder; created if missing.
    durable
        fsync files and folders (default). Turn off only for throwaway stores in tests or benchmarks.
    """

    def __init__(self, root: Path, *, durable: bool = True) -> None:
        self.root = root
        self.durable = durable
        self.originals_dir = root / "originals"
        self.derived_dir = root / "derived"
        self.temp_dir = root / "tmp"
        for folder in (self.originals_dir, self.derived_dir, self.temp_dir):
            make_directories(folder)

    # -- originals ---------------------------------------------------------------------------------------

    def path_for(self, key: str) -> Path:
        """Where the original `key` lives (whether or not it exists yet)."""
        first, second, name = sharded_parts(key)
        return self.originals_dir / first / second / name

    def put_file(self, source_path: Path, *, expected_sha256: str | None = None) -> StoredObject:
        """Store a copy of `source_path` under its SHA-256 and return its key and size.

        Parameters
        ----------
        source_path
            The file to store; it is copied, never moved or changed.
        expected_sha256
            The hash the caller computed while receiving the file. If an original with that key and the
            same size is already stored, nothing is copied; otherwise the copy must hash to it.

        Raises
        ------
        ChecksumMismatch
            The file does not hash to `expected_sha256`.
        StorageFull, StorageError
            The copy could not be made durable; no temp file is left behind.
        """
        if expected_sha256 is not None:
            existing = self._existing(check_key(expected_sha256), source_path.stat().st_size)
            if existing is not None:
                return existing
        with source_path.open("rb") as source:
            temp_path, digest, size = write_temp_copy(source, self.temp_dir)
        try:
            if expected_sha256 is not None and digest != expected_sha256:
                raise ChecksumMismatch(f"{source_path.name} hashes to {digest}, not {expected_sha256}")
            return self._existing(digest, size) or self._install(temp_path, digest, size)
        finally:
            temp_path.unlink(missing_ok=True)

    def _existing(self, key: str, size: int) -> StoredObject | None:
        final = self.path_for(key)
        try:
            if final.stat().st_size != size:
                return None  # a damaged copy: replace it with the good one
            # Refresh the write time so an orphan sweep running now does not take a file about to be used.
            os.utime(final)
        except FileNotFoundError:
            return None
        except OSError as exc:
            raise storage_error_from(exc, action=f"refreshing stored file {key}") from exc
        return StoredObject(key=key, size=size)

    def _install(self, temp_path: Path, key: str, size: int) -> StoredObject:
        final = self.path_for(key)
        try:
            make_directories(final.parent)
            os.chmod(temp_path, _ORIGINAL_MODE)
            os.replace(temp_path, final)
            if self.durable:
                fsync_directory(final.parent)
        except OSError as exc:
            raise storage_error_from(exc, action=f"storing {key}") from exc
        return StoredObject(key=key, size=size)

    def exists(self, key: str) -> bool:
        """Whether an original is stored under `key`."""
        return self.path_for(key).is_file()

    def open_verified(self, key: str) -> IO[bytes]:
        """Open an original after checking its bytes hash to `key` (read twice; the same open file is returned).

        Raises
        ------
        StoredFileMissing, StoredFileCorrupt
        """
        return _open_checked(self.path_for(key), key, label=key)

    def read_verified(self, key: str) -> bytes:
        """The whole content of an original, checked against `key`."""
        with self.open_verified(key) as stream:
            return stream.read()

    def copy_verified(self, key: str, destination: Path) -> Path:
        """Copy an original to `destination` after checking it against `key`."""
        with self.open_verified(key) as stream, destination.open("wb") as target:
            shutil.copyfileobj(stream, target, 1024 * 1024)
        return destination

    def delete(self, key: str, *, if_older_than: datetime | None = None) -> bool:
        """Remove an original; True if it was removed."""
        final = self.path_for(key)
        try:
            if if_older_than is not None and _modified_at(final) >= if_older_than:
                return False
            final.unlink()
        except FileNotFoundError:
            return False
        if self.durable:
            fsync_directory(final.parent)
        return True

    def iter_originals(self) -> Iterator[StoredEntry]:
        """Every stored original with size and last write time (files that are not keys are skipped)."""
        for path in sorted(self.originals_dir.glob("??/??/*")):
            name = path.name
            if len(name) != 64 or path.parent.parent.name != name[:2] or path.parent.name != name[2:4]:
                continue
            try:
                check_key(name)
                stat = path.stat()
            except (StorageError, FileNotFoundError):
                continue
            yield StoredEntry(key=name, size=stat.st_size, modified_at=datetime.fromtimestamp(stat.st_mtime, UTC))

    def iter_keys(self) -> Iterator[str]:
        """Every stored original's key."""
        return (entry.key for entry in self.iter_originals())

    # -- derived folders ---------------------------------------------------------------------------------

    def derived_path(self, name: str) -> Path:
        """The folder of the published derived folder `name` (whether or not it exists)."""
        return self.derived_dir / check_derived_name(name)

    def stage_derived(self, name: str) -> DerivedStaging:
        """Start building derived folder `name` in ``tmp/``; publish or discard through the returned object."""
        return open_staging(self.temp_dir, name, publish=self._publish)

    def _publish(self, name: str, staging_path: Path) -> None:
        final = self.derived_path(name)
        try:
            entries = build_manifest(staging_path)
            (staging_path / MANIFEST_NAME).write_bytes(manifest_to_bytes(name, entries))
            if self.durable:
                fsync_tree(staging_path)
            previous = self._move_aside(final)
            self._rename_or_restore(staging_path, final, previous)
            if self.durable:
                fsync_directory(self.derived_dir)
        except OSError as exc:
            raise storage_error_from(exc, action=f"publishing derived folder {name}") from exc
        if previous is not None:
            shutil.rmtree(previous, ignore_errors=True)

    @staticmethod
    def _rename_or_restore(staging_path: Path, final: Path, previous: Path | None) -> None:
        try:
            os.rename(staging_path, final)
        except OSError:
            if previous is not None:
                os.rename(previous, final)  # put the old version back rather than leave the name empty
            raise

    def _move_aside(self, folder: Path) -> Path | None:
        aside = new_temp_path(self.temp_dir, suffix=".removed")
        try:
            os.rename(folder, aside)
        except FileNotFoundError:
            return None
        return aside

    def derived_exists(self, name: str) -> bool:
        """Whether derived folder `name` is published."""
        return (self.derived_path(name) / MANIFEST_NAME).is_file()

    def derived_manifest(self, name: str) -> dict[str, ManifestEntry]:
        """Relative path -> size and SHA-256 of each file of published derived folder `name`."""
        try:
            data = (self.derived_path(name) / MANIFEST_NAME).read_bytes()
        except FileNotFoundError as exc:
            raise StoredFileMissing(f"no published derived folder {name}") from exc
        return manifest_from_bytes(data)

    def derived_file_path(self, name: str, relative_path: str) -> Path:
        """Local path of one derived file (local store only), e.g. for serving tiles directly."""
        return self.derived_path(name) / check_relative_path(relative_path)

    def open_derived(self, name: str, relative_path: str, *, verify: bool = False) -> IO[bytes]:
        """Open one derived file; with `verify`, check it against the folder's manifest first."""
        path = self.derived_file_path(name, relative_path)
        label = f"{name}/{relative_path}"
        if verify:
            entry = self.derived_manifest(name).get(relative_path)
            if entry is None:
                raise StoredFileMissing(f"no derived file {label}")
            return _open_checked(path, entry.sha256, label=label)
        try:
            return path.open("rb")
        except FileNotFoundError as exc:
            raise StoredFileMissing(f"no derived file {label}") from exc

    def copy_derived(self, name: str, relative_path: str, destination: Path) -> Path:
        """Copy one derived file to `destination`, checked against the manifest."""
        with self.open_derived(name, relative_path, verify=True) as stream, destination.open("wb") as target:
            shutil.copyfileobj(stream, target, 1024 * 1024)
        return destination

    def delete_derived(self, name: str, *, if_older_than: datetime | None = None) -> bool:
        """Remove derived folder `name` (published or not) at once; True if it was removed."""
        final = self.derived_path(name)
        try:
            if if_older_than is not None and self._derived_modified_at(final) >= if_older_than:
                return False
        except FileNotFoundError:
            return False
        aside = self._move_aside(final)
        if aside is None:
            return False
        if self.durable:
            fsync_directory(self.derived_dir)
        shutil.rmtree(aside, ignore_errors=True)
        return True

    @staticmethod
    def _derived_modified_at(folder: Path) -> datetime:
        manifest = folder / MANIFEST_NAME
        return _modified_at(manifest if manifest.exists() else folder)

    def iter_derived(self) -> Iterator[DerivedEntry]:
        """Every folder under ``derived/`` with a valid name, published or not."""
        for folder in sorted(self.derived_dir.iterdir()):
            try:
                check_derived_name(folder.name)
                modified_at = self._derived_modified_at(folder)
            except (StorageError, FileNotFoundError):
                continue
            published = (folder / MANIFEST_NAME).is_file()
            yield DerivedEntry(name=folder.name, modified_at=modified_at, published=published)

    # -- housekeeping ------------------------------------------------------------------------------------

    def remove_stale_temporaries(self, *, older_than: datetime) -> list[str]:
        """Remove entries of ``tmp/`` last written before `older_than` (left by crashes); return their names."""
        return remove_entries_older_than(self.temp_dir, older_than=older_than)
