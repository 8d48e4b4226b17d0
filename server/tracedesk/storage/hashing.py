"""SHA-256 of files and streams, read in chunks so memory stays flat whatever the file size."""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import IO

#: 1 MiB: large enough that hashing runs at hashlib speed, small enough to be irrelevant in memory.
CHUNK_BYTES = 1024 * 1024


def sha256_of_file(path: Path, *, chunk_bytes: int = CHUNK_BYTES) -> str:
    """The SHA-256 of a file's content as 64 lowercase hex digits."""
    with path.open("rb") as stream:
        return sha256_of_stream(stream, chunk_bytes=chunk_bytes)[0]


def sha256_of_stream(stream: IO[bytes], *, chunk_bytes: int = CHUNK_BYTES) -> tuple[str, int]:
    """Read `stream` to its end; return its SHA-256 (hex) and the number of bytes read."""
    digest = hashlib.sha256()
    size = 0
    while chunk := stream.read(chunk_bytes):
        digest.update(chunk)
        size += len(chunk)
    return digest.hexdigest(), size


class HashingWriter:
    """Wrap a binary writable so that everything written is also hashed (for receiving uploads).

    Examples
    --------
    >>> import io
    >>> writer = HashingWriter(io.BytesIO())
    >>> writer.write(b"abc")
    3
    >>> writer.hexdigest()[:16], writer.size
    ('ba7816bf8f01cfea', 3)
    """

    def __init__(self, target: IO[bytes]) -> None:
        self._target = target
        self._digest = hashlib.sha256()
        self.size = 0

    def write(self, data: bytes) -> int:
        """Write `data` to the target and add it to the hash."""
        written = self._target.write(data)
        self._digest.update(data)
        self.size += len(data)
        return written

    def hexdigest(self) -> str:
        """SHA-256 of everything written so far, hex."""
        return self._digest.hexdigest()
