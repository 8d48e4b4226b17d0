"""Loading a sheet's image (the pixels every traced vertex refers to) from the file store.

Raster uploads (PNG, JPEG, TIFF) are decoded again from the verified original when needed: decoding is
deterministic and fast, and keeping a second, uncompressed copy would cost about 100 MB per A4 sheet at 600 dpi.
PDF pages keep their rendered image (``normalised.tif``), because a renderer upgrade could move pixels.
The last few decoded sheets stay in memory (tracing, colour picking and exports often read the same one).
"""

from __future__ import annotations

import json
import tempfile
from collections import OrderedDict
from pathlib import Path
from threading import Lock

import numpy as np
from numpy.typing import NDArray

from tracedesk.archive.files import NORMALISED_NAME, SOURCE_NAME
from tracedesk.imaging.limits import DEFAULT_LIMITS, DecodeLimits
from tracedesk.imaging.normalise import load_normalised
from tracedesk.imaging.pages import decode_sheet, examine_upload
from tracedesk.storage import FileStore, LocalFileStore, StoredFileCorrupt, sha256_of_file

CACHED_SHEETS = 2
_cache: OrderedDict[str, NDArray[np.uint8]] = OrderedDict()
_cache_lock = Lock()
# The decoding limits of this process's settings (set by build_state): a stored original is decoded again under
# the limits it was accepted with, not the built-in defaults (a raised pixel cap must not refuse it later).
_limits: DecodeLimits | None = None


def use_decode_limits(limits: DecodeLimits) -> None:
    """Decode stored originals under ``limits`` from now on (called once per app or worker with its settings)."""
    global _limits
    _limits = limits


def _decode_original(store: FileStore, derived_key: str, folder: Path) -> NDArray[np.uint8]:
    with store.open_derived(derived_key, SOURCE_NAME) as stream:
        source = json.loads(stream.read().decode("utf-8"))
    key = str(source["sha256"])
    if isinstance(store, LocalFileStore):
        path = store.path_for(key)
        actual = sha256_of_file(path)
        if actual != key:
            raise StoredFileCorrupt(key, actual)
    else:
        path = store.copy_verified(key, folder / "original")
    info = examine_upload(path, declared_name=str(source.get("filename") or ""), limits=_limits or DEFAULT_LIMITS)
    image = decode_sheet(info, info.pages[int(source["page_index"])]).image
    return np.asarray(image.numpy(), dtype=np.uint8).reshape(image.height, image.width, -1)[:, :, :3]


def _load(store: FileStore, derived_key: str) -> NDArray[np.uint8]:
    with tempfile.TemporaryDirectory(prefix="sheet-") as folder:
        if isinstance(store, LocalFileStore):
            path = store.derived_file_path(derived_key, NORMALISED_NAME)
            if path.is_file():
                return load_normalised(path)
        elif NORMALISED_NAME in store.derived_manifest(derived_key):
            return load_normalised(store.copy_derived(derived_key, NORMALISED_NAME, Path(folder) / NORMALISED_NAME))
        return _decode_original(store, derived_key, Path(folder))


def load_sheet_image(store: FileStore, derived_key: str) -> NDArray[np.uint8]:
    """The sheet as an (H, W, 3) uint8 sRGB array (a private copy the caller may change)."""
    with _cache_lock:
        cached = _cache.get(derived_key)
        if cached is not None:
            _cache.move_to_end(derived_key)
            return cached.copy()
    image = np.ascontiguousarray(_load(store, derived_key))
    with _cache_lock:
        _cache[derived_key] = image
        while len(_cache) > CACHED_SHEETS:
            _cache.popitem(last=False)
    return image.copy()
