"""The manifest of a derived folder: every file's relative path, size and SHA-256, written last on publish.

On the local disk the folder appears by one rename, so the manifest is a checksum list; in an object store,
where many objects cannot appear at once, the manifest object is uploaded last and is what makes a derived
folder "published": a folder without one is an interrupted upload for the orphan sweep to remove.
"""

from __future__ import annotations

import json
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

from tracedesk.storage.errors import InvalidStorageName, StorageError
from tracedesk.storage.hashing import sha256_of_file
from tracedesk.storage.names import check_relative_path

#: File name of the manifest inside a derived folder; its leading dot keeps it out of callers' names.
MANIFEST_NAME = ".manifest.json"
_FORMAT_VERSION = 1


@dataclass(frozen=True, slots=True)
class ManifestEntry:
    """One derived file: its size in bytes and SHA-256 (hex)."""

    size: int
    sha256: str


def _entry(path: Path) -> ManifestEntry:
    return ManifestEntry(size=path.stat().st_size, sha256=sha256_of_file(path))


def build_manifest(folder: Path, *, workers: int = 4) -> dict[str, ManifestEntry]:
    """Hash every file under `folder` (in `workers` threads), keyed by its ``/``-separated relative path.

    Raises
    ------
    InvalidStorageName
        A file or folder name that the store would refuse (e.g. hidden files, spaces), or a symlink.
    """
    paths: dict[str, Path] = {}
    for current, subfolders, files in os.walk(folder):
        subfolders.sort()
        for name in sorted(files):
            path = Path(current) / name
            relative = path.relative_to(folder).as_posix()
            if relative == MANIFEST_NAME:
                continue
            check_relative_path(relative)
            if path.is_symlink():
                raise InvalidStorageName(f"derived files may not be symlinks: {relative}")
            paths[relative] = path
    with ThreadPoolExecutor(max_workers=workers) as pool:
        entries = pool.map(_entry, paths.values())
        return dict(zip(paths, entries, strict=True))


def manifest_to_bytes(name: str, entries: dict[str, ManifestEntry]) -> bytes:
    """Serialise a manifest as canonical JSON (sorted keys) so equal content gives equal bytes."""
    document = {
        "format": _FORMAT_VERSION,
        "name": name,
        "files": {path: {"size": entry.size, "sha256": entry.sha256} for path, entry in entries.items()},
    }
    return json.dumps(document, sort_keys=True, separators=(",", ":")).encode("utf-8")


def manifest_from_bytes(data: bytes) -> dict[str, ManifestEntry]:
    """Parse a manifest written by `manifest_to_bytes`.

    Raises
    ------
    StorageError
        The manifest is not valid JSON of the expected shape.
    """
    try:
        document = json.loads(data)
        files = document["files"]
        return {
            check_relative_path(path): ManifestEntry(size=int(item["size"]), sha256=str(item["sha256"]))
            for path, item in files.items()
        }
    except (ValueError, KeyError, TypeError, AttributeError) as exc:
        raise StorageError(f"a derived-folder manifest is unreadable: {exc}") from exc
