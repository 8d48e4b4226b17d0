"""What the web process and a decoder process say to each other: length-prefixed JSON frames and raw pixels.

A frame is a 4-byte big-endian length followed by that many bytes of UTF-8 JSON holding one object. A reply
whose ``payload_bytes`` is n > 0 is followed by exactly n raw bytes (a page's pixels: rows top to bottom, 3
bytes a pixel, no padding). A session opens with ``{"memory_bytes": ...}`` from the web process, answered by
``{"ready": true}`` once the decoder has confined itself; then every request
``{"operation": ..., "arguments": {...}, "cpu_seconds": ...}`` gets exactly one reply, which is one of

* a result: any object without the keys below (``payload_bytes`` 0 when absent);
* ``{"refused": <UploadRefused.code>, "reason": ...}``: the file is refused, as the decoder explained;
* ``{"out_of_memory": true}``: the decoder hit its memory limit and recovered enough to say so;
* ``{"error": ...}``: an unexpected exception (a bug), described for the log.
"""

from __future__ import annotations

import json
import os
import struct
from collections.abc import Callable, Iterable, Mapping
from typing import Any

_LENGTH = struct.Struct(">I")
#: Frames carry small JSON objects (a page list of 500 pages is about 20 kB); anything larger is a broken peer.
MAX_FRAME_BYTES = 4 * 2**20

Chunk = bytes | bytearray | memoryview
#: How an operation answers: the reply's header, then the pieces of its payload.
Respond = Callable[[Mapping[str, Any], Iterable[Chunk]], None]
#: An operation of the decoder process: gets the request's arguments and answers exactly once.
Operation = Callable[[Mapping[str, Any], Respond], None]


class WireError(RuntimeError):
    """The other side broke the protocol (a frame too long or not a JSON object)."""


def write_all(fd: int, data: Chunk) -> None:
    """Write every byte of `data` to the file descriptor `fd` (a pipe takes at most its buffer at a time)."""
    view = memoryview(data).cast("B")
    while view:
        view = view[os.write(fd, view) :]


def write_frame(fd: int, message: Mapping[str, Any], payload: Iterable[Chunk] = ()) -> None:
    """Write one frame, then the pieces of its payload (whose total the message's ``payload_bytes`` states)."""
    body = json.dumps(message, separators=(",", ":")).encode("utf-8")
    write_all(fd, _LENGTH.pack(len(body)) + body)
    for chunk in payload:
        write_all(fd, chunk)


def read_exactly(fd: int, count: int) -> bytes | None:
    """`count` bytes from `fd`, or None if it ends first (the other side closed or died)."""
    parts: list[bytes] = []
    missing = count
    while missing:
        part = os.read(fd, missing)
        if not part:
            return None
        parts.append(part)
        missing -= len(part)
    return b"".join(parts)


def read_frame(fd: int) -> dict[str, Any] | None:
    """The next frame's object, or None if the stream ended (at or inside the frame).

    Raises
    ------
    WireError
        The frame is longer than `MAX_FRAME_BYTES` or does not hold a JSON object.
    """
    head = read_exactly(fd, _LENGTH.size)
    if head is None:
        return None
    (length,) = _LENGTH.unpack(head)
    if length > MAX_FRAME_BYTES:
        raise WireError(f"a frame of {length} bytes is longer than the limit of {MAX_FRAME_BYTES}")
    body = read_exactly(fd, length)
    if body is None:
        return None
    message = json.loads(body)
    if not isinstance(message, dict):
        raise WireError("a frame does not hold a JSON object")
    return message


def read_into(fd: int, target: memoryview) -> int:
    """Fill `target` from `fd` without an intermediate copy; the bytes read (fewer if the stream ended)."""
    filled = 0
    while filled < len(target):
        got = os.readv(fd, [target[filled:]])
        if not got:
            break
        filled += got
    return filled
