"""Serving stored bytes: originals (verified against their SHA-256), thumbnails and deep-zoom tiles."""

from __future__ import annotations

import re
from collections.abc import Iterator
from typing import IO

from fastapi.responses import FileResponse, Response, StreamingResponse

from tracedesk.archive.service import SheetWithSource
from tracedesk.errors import NotFound
from tracedesk.storage import FileStore, InvalidStorageName, LocalFileStore, StoredFileMissing

NORMALISED_NAME = "normalised.tif"
SOURCE_NAME = "source.json"
THUMBNAIL_NAME = "thumbnail.jpg"
PYRAMID_BASENAME = "sheet"
TILE_PATH = re.compile(r"^(sheet\.dzi|sheet_files/\d{1,2}/\d{1,5}_\d{1,5}\.jpg)$")
CHUNK = 1 << 20
# Derived folders are never rewritten under the same name, so browsers may keep tiles for a day.
TILE_CACHE = "private, max-age=86400"


def _chunks(stream: IO[bytes]) -> Iterator[bytes]:
    with stream:
        while chunk := stream.read(CHUNK):
            yield chunk


def _download_name(filename: str) -> str:
    return re.sub(r"[^A-Za-z0-9._ -]", "_", filename)[:200] or "original"


def original_response(store: FileStore, item: SheetWithSource) -> Response:
    """The uploaded file's exact bytes; the store checks them against the SHA-256 before the first byte goes out."""
    stream = store.open_verified(item.source.sha256)
    headers = {
        "Content-Disposition": f'attachment; filename="{_download_name(item.sheet.filename)}"',
        "Content-Length": str(item.source.size_bytes),
        "X-Content-SHA256": item.source.sha256,
        "X-Content-Type-Options": "nosniff",
    }
    return StreamingResponse(_chunks(stream), media_type=item.source.media_type, headers=headers)


def _media_type(relative_path: str) -> str:
    if relative_path.endswith(".dzi"):
        return "application/xml"
    return "image/jpeg"


def derived_response(store: FileStore, derived_key: str, relative_path: str) -> Response:
    """A file of a sheet's published derived folder (tile, descriptor or thumbnail)."""
    headers = {"Cache-Control": TILE_CACHE}
    try:
        if isinstance(store, LocalFileStore):
            path = store.derived_file_path(derived_key, relative_path)
            if not path.is_file():
                raise NotFound(f"no such derived file: {relative_path}")
            return FileResponse(path, media_type=_media_type(relative_path), headers=headers)
        stream = store.open_derived(derived_key, relative_path)
    except (StoredFileMissing, InvalidStorageName) as error:
        raise NotFound(f"no such derived file: {relative_path}") from error
    return StreamingResponse(_chunks(stream), media_type=_media_type(relative_path), headers=headers)


def tile_response(store: FileStore, derived_key: str, tile_path: str) -> Response:
    if not TILE_PATH.match(tile_path):
        raise NotFound(f"no such tile: {tile_path}")
    return derived_response(store, derived_key, tile_path)
