"""What every file store offers: content-addressed originals and named folders of derived files.

Originals are keyed by the SHA-256 of their bytes (64 lowercase hex digits), stored once however often they are
uploaded, and verified against that hash whenever they are read. Derived files (normalised image, thumbnail,
tile pyramid) live in folders named by the caller (e.g. a sheet's public id), are built in a private staging
folder and published all at once, and carry a manifest of their SHA-256s.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from types import TracebackType
from typing import IO, Protocol

from tracedesk.storage.manifest import ManifestEntry


@dataclass(frozen=True, slots=True)
class StoredObject:
    """An original in the store: its key (SHA-256, hex) and size in bytes."""

    key: str
    size: int


@dataclass(frozen=True, slots=True)
class StoredEntry:
    """An original as listed for the orphan sweep: key, size in bytes, last write time (UTC)."""

    key: str
    size: int
    modified_at: datetime


@dataclass(frozen=True, slots=True)
class DerivedEntry:
    """A derived folder as listed for the orphan sweep.

    Attributes
    ----------
    name
        The folder's name.
    modified_at
        When it was last published or written (UTC).
    published
        False for an interrupted publish (no manifest yet): never served, removed by the sweep.
    """

    name: str
    modified_at: datetime
    published: bool


class DerivedStaging:
    """A private folder where one derived folder is built before it is published under its name.

    As a context manager it publishes on a clean exit and discards the folder if the block raises; `publish`
    and `discard` may also be called directly (e.g. to publish several sheets only once all decoded).
    """

    def __init__(self, name: str, path: Path, *, publish: Callable[[], None], discard: Callable[[], None]) -> None:
        self.name = name
        self.path = path
        self._publish = publish
        self._discard = discard
        self.state = "open"

    def publish(self) -> None:
        """Make the staged files visible under `name`, replacing a previous version; once only."""
        if self.state != "open":
            raise RuntimeError(f"derived folder {self.name!r} is already {self.state}")
        try:
            self._publish()
        except BaseException:
            self.discard()
            raise
        self.state = "published"

    def discard(self) -> None:
        """Remove the staged files; nothing is published. Safe to call more than once."""
        if self.state == "open":
            self._discard()
            self.state = "discarded"

    def __enter__(self) -> DerivedStaging:
        return self

    def __exit__(
        self, exc_type: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None
    ) -> None:
        if exc_type is not None:
            self.discard()
        elif self.state == "open":
            self.publish()


class FileStore(Protocol):
    """The storage interface the services use; `LocalFileStore` and `S3FileStore` implement it."""

    def put_file(self, source_path: Path, *, expected_sha256: str | None = None) -> StoredObject:
        """Store a file's bytes under their SHA-256; idempotent; durable before it returns."""
        ...

    def exists(self, key: str) -> bool:
        """Whether an original is stored under `key`."""
        ...

    def open_verified(self, key: str) -> IO[bytes]:
        """An open binary file positioned at 0 whose content was checked against `key`; caller closes."""
        ...

    def read_verified(self, key: str) -> bytes:
        """The whole content of an original, checked against `key` (use `open_verified` for big files)."""
        ...

    def copy_verified(self, key: str, destination: Path) -> Path:
        """Copy an original to a local path (for decoders that need one), checked against `key`."""
        ...

    def delete(self, key: str, *, if_older_than: datetime | None = None) -> bool:
        """Remove an original; False if absent or (with `if_older_than`) written since. True if removed."""
        ...

    def iter_keys(self) -> Iterator[str]:
        """Every stored original's key."""
        ...

    def iter_originals(self) -> Iterator[StoredEntry]:
        """Every stored original with its size and last write time."""
        ...

    def stage_derived(self, name: str) -> DerivedStaging:
        """Start building the derived folder `name` in a private local folder."""
        ...

    def derived_exists(self, name: str) -> bool:
        """Whether a published derived folder `name` exists."""
        ...

    def derived_manifest(self, name: str) -> dict[str, ManifestEntry]:
        """Relative path -> size and SHA-256 of every file of a published derived folder."""
        ...

    def open_derived(self, name: str, relative_path: str, *, verify: bool = False) -> IO[bytes]:
        """Open one derived file; with `verify`, check it against the manifest first; caller closes."""
        ...

    def copy_derived(self, name: str, relative_path: str, destination: Path) -> Path:
        """Copy one derived file to a local path, checked against the manifest."""
        ...

    def delete_derived(self, name: str, *, if_older_than: datetime | None = None) -> bool:
        """Remove a derived folder; False if absent or (with `if_older_than`) written since."""
        ...

    def iter_derived(self) -> Iterator[DerivedEntry]:
        """Every derived folder, published or interrupted."""
        ...

    def remove_stale_temporaries(self, *, older_than: datetime) -> list[str]:
        """Remove temp files and staging folders last written before `older_than`; return their names."""
        ...
