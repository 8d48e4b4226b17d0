"""Loading a sheet's normalised image (the pixels every traced vertex refers to) from the file store."""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from tracedesk.archive.files import NORMALISED_NAME
from tracedesk.imaging.normalise import load_normalised
from tracedesk.storage import FileStore, LocalFileStore


def load_sheet_image(store: FileStore, derived_key: str) -> NDArray[np.uint8]:
    """The sheet as an (H, W, 3) uint8 sRGB array, from the local store directly or via a verified copy."""
    if isinstance(store, LocalFileStore):
        return load_normalised(store.derived_file_path(derived_key, NORMALISED_NAME))
    with tempfile.TemporaryDirectory(prefix="sheet-") as folder:
        path = store.copy_derived(derived_key, NORMALISED_NAME, Path(folder) / NORMALISED_NAME)
        return load_normalised(path)
