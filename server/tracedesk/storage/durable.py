"""Durable local writes: temp file, fsync, rename, fsync the folder; nothing partial left behind on failure.

A rename is atomic only within one filesystem, so temp files live in the store's own ``tmp/`` folder under the
same root as their destination. After `os.replace` the destination folder is fsynced too, because the rename
itself is only durable once the folder's entry is on disk (POSIX leaves it to the filesystem otherwise).
"""

from __future__ import annotations

import errno
import hashlib
import os
import shutil
import uuid
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from datetime import datetime
from pathlib import Path
from typing import IO

from tracedesk.storage.errors import StorageError, StorageFull
from tracedesk.storage.hashing import CHUNK_BYTES
from tracedesk.storage.names import check_derived_name
from tracedesk.storage.protocol import DerivedStaging

_FULL_ERRNOS = frozenset({errno.ENOSPC, errno.EDQUOT})
TEMP_PREFIX = "incoming-"


def storage_error_from(exc: OSError, *, action: str) -> StorageError:
    """The storage exception for an OSError raised while doing `action` (disk full gets its own class)."""
    if exc.errno in _FULL_ERRNOS:
        return StorageFull(f"no space left on the storage volume while {action}")
    return StorageError(f"storage failed while {action}: {exc.strerror or exc}")


def fsync_directory(path: Path) -> None:
    """Flush a folder's entries (new, renamed or removed files) to disk."""
    descriptor = os.open(path, os.O_RDONLY | os.O_DIRECTORY)
    try:
        os.fsync(descriptor)
    finally:
        os.close(descriptor)


def make_directories(path: Path) -> None:
    """Create `path` and any missing parents, fsyncing each parent that gained an entry."""
    missing: list[Path] = []
    current = path
    while not current.exists():
        missing.append(current)
        current = current.parent
    for folder in reversed(missing):
        try:
            folder.mkdir()
        except FileExistsError:
            continue  # another writer created it first: fine, it is there
        fsync_directory(folder.parent)


def new_temp_path(temp_dir: Path, *, suffix: str = "") -> Path:
    """A fresh, unused name in `temp_dir` (random, so concurrent writers never collide)."""
    return temp_dir / f"{TEMP_PREFIX}{uuid.uuid4().hex}{suffix}"


def _write_all(descriptor: int, data: bytes) -> None:
    view = memoryview(data)
    while view:
        written = os.write(descriptor, view)
        view = view[written:]


def write_temp_copy(source: IO[bytes], temp_dir: Path) -> tuple[Path, str, int]:
    """Copy `source` into a new fsynced temp file in `temp_dir`, hashing as it goes.

    Returns
    -------
    tuple
        The temp file's path, its SHA-256 (hex) and its size in bytes.

    Raises
    ------
    StorageFull, StorageError
        The write or fsync failed; the temp file has been removed.
    """
    temp_path = new_temp_path(temp_dir)
    digest = hashlib.sha256()
    size = 0
    try:
        descriptor = os.open(temp_path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o640)
        try:
            while chunk := source.read(CHUNK_BYTES):
                _write_all(descriptor, chunk)
                digest.update(chunk)
                size += len(chunk)
            os.fsync(descriptor)
        finally:
            os.close(descriptor)
    except OSError as exc:
        temp_path.unlink(missing_ok=True)
        raise storage_error_from(exc, action="writing a temporary copy") from exc
    except BaseException:
        temp_path.unlink(missing_ok=True)
        raise
    return temp_path, digest.hexdigest(), size


def fsync_file(path: Path) -> None:
    """Flush one file's content to disk."""
    descriptor = os.open(path, os.O_RDONLY)
    try:
        os.fsync(descriptor)
    finally:
        os.close(descriptor)


def fsync_tree(root: Path, *, workers: int = 16) -> None:
    """Flush every file and folder under `root` (used before publishing a staged derived folder).

    The files are flushed from several threads: each fsync waits for a journal commit, and concurrent fsyncs
    share commits. Measured on a 760-tile pyramid plus a 105 MB image: 0.13-0.18 s in parallel against
    0.17-3.3 s one by one (the slow end when other writes are pending).
    """
    folders: list[Path] = []
    files: list[Path] = []
    for current, _subfolders, names in os.walk(root):
        folders.append(Path(current))
        files.extend(Path(current) / name for name in names)
    with ThreadPoolExecutor(max_workers=workers) as pool:
        list(pool.map(fsync_file, files))
    for folder in reversed(folders):
        fsync_directory(folder)


def remove_entries_older_than(folder: Path, *, older_than: datetime) -> list[str]:
    """Remove the files and folders directly in `folder` last written before `older_than`; return their names."""
    removed: list[str] = []
    for entry in sorted(folder.iterdir()):
        try:
            if datetime.fromtimestamp(entry.lstat().st_mtime, older_than.tzinfo) >= older_than:
                continue
            if entry.is_dir() and not entry.is_symlink():
                shutil.rmtree(entry)
            else:
                entry.unlink()
        except FileNotFoundError:
            continue  # removed by someone else meanwhile
        removed.append(entry.name)
    return removed


def open_staging(parent: Path, name: str, *, publish: Callable[[str, Path], None]) -> DerivedStaging:
    """A new private staging folder under ``parent`` for derived folder ``name``; ``publish(name, path)`` makes
    it visible, discarding removes it. Shared by every store so staging behaves the same everywhere."""
    check_derived_name(name)
    staging_path = new_temp_path(parent, suffix=".derived")
    try:
        staging_path.mkdir()
    except OSError as exc:
        raise storage_error_from(exc, action="creating a staging folder") from exc
    return DerivedStaging(
        name,
        staging_path,
        publish=lambda: publish(name, staging_path),
        discard=lambda: shutil.rmtree(staging_path, ignore_errors=True),
    )
