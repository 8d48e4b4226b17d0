"""Ingest of an A4 scan at 600 dpi (7000 x 5000 RGB) from upload to viewable pyramid, stage by stage.

Run: .venv/bin/python bench/bench_ingest.py [--repeat 3]

For a JPEG, a PNG and an LZW TIFF (generated in a temp folder: paper tone, grid, a pen line and sensor-like
noise), prints the median time of each stage over the repeats, the total, the ratio of the total to a plain
Pillow decode of the same file (measured in the same run, the reference), and the peak resident memory during
one ingest. Target: decode + normalise + store normalised + pyramid + thumbnail <= 3 s.
Files are in the page cache (just written), as an upload that was just received would be.
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pyvips
from PIL import Image

from tracedesk.imaging import (
    decode_sheet,
    examine_upload,
    save_normalised,
    save_pyramid,
    save_thumbnail,
)
from tracedesk.storage import LocalFileStore

WIDTH, HEIGHT = 7000, 5000
CORE_STAGES = ("decode+normalise", "store normalised", "pyramid", "thumbnail")
ALL_STAGES = ("examine headers", "store original", *CORE_STAGES, "publish (hash+fsync)")


def synthetic_scan() -> Any:
    """A chart-like 7000 x 5000 RGB pyvips image with noise (noise keeps compressors honest)."""
    rng = np.random.default_rng(1)
    pixels = np.empty((HEIGHT, WIDTH, 3), np.uint8)
    pixels[:] = (238, 232, 215)
    pixels[:, ::59] = (200, 120, 120)
    pixels[::59, :] = (200, 120, 120)
    columns = np.arange(WIDTH)
    rows = (HEIGHT / 2 + 1500 * np.sin(columns / 700)).astype(int)
    for offset in range(-3, 4):
        pixels[np.clip(rows + offset, 0, HEIGHT - 1), columns] = (30, 30, 160)
    noise = rng.normal(0, 4, size=(HEIGHT, WIDTH, 1)).astype(np.int16)
    noisy = np.clip(pixels.astype(np.int16) + noise, 0, 255).astype(np.uint8)
    return pyvips.Image.new_from_array(noisy, interpretation="srgb").copy(xres=600 / 25.4, yres=600 / 25.4)


def write_inputs(folder: Path) -> dict[str, Path]:
    image = synthetic_scan()
    paths = {"jpeg": folder / "scan.jpg", "png": folder / "scan.png", "tiff": folder / "scan.tif"}
    image.jpegsave(str(paths["jpeg"]), Q=90)
    image.pngsave(str(paths["png"]), compression=6)
    image.tiffsave(str(paths["tiff"]), compression="lzw")
    return paths


def _timed(timings: dict[str, float], stage: str, action: Callable[[], Any]) -> Any:
    start = time.perf_counter()
    result = action()
    timings[stage] = time.perf_counter() - start
    return result


def ingest_once(path: Path, store: LocalFileStore, name: str) -> dict[str, float]:
    """Run every stage of one ingest into `store`; return seconds per stage."""
    timings: dict[str, float] = {}
    info = _timed(timings, "examine headers", lambda: examine_upload(path, declared_name=path.name))
    _timed(timings, "store original", lambda: store.put_file(path))
    sheet = _timed(timings, "decode+normalise", lambda: decode_sheet(info, info.pages[0]))
    staging = store.stage_derived(name)
    _timed(timings, "store normalised", lambda: save_normalised(sheet, staging.path / "normalised.tif"))
    _timed(timings, "pyramid", lambda: save_pyramid(sheet, staging.path))
    _timed(timings, "thumbnail", lambda: save_thumbnail(sheet, staging.path / "thumbnail.jpg"))
    _timed(timings, "publish (hash+fsync)", staging.publish)
    return timings


def pillow_decode(path: Path) -> float:
    """Seconds for a plain Pillow decode of the file (the reference)."""
    start = time.perf_counter()
    with Image.open(path) as image:
        image.load()
    return time.perf_counter() - start


def _status_mib(field: str) -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1]) / 1024
    return float("nan")


def peak_rss_of(action: Callable[[], Any]) -> tuple[float, float]:
    """(peak RSS, growth of the peak over the RSS before) in MiB while running `action` (Linux)."""
    try:
        Path("/proc/self/clear_refs").write_text("5")
    except OSError:
        return float("nan"), float("nan")
    before = _status_mib("VmRSS")
    action()
    peak = _status_mib("VmHWM")
    return peak, peak - before


def bench_format(label: str, path: Path, root: Path, repeat: int) -> dict[str, float]:
    runs: list[dict[str, float]] = []
    references: list[float] = []
    for attempt in range(repeat):
        store = LocalFileStore(root / f"{label}-{attempt}")
        runs.append(ingest_once(path, store, f"sheet-{attempt}"))
        references.append(pillow_decode(path))
    result = {stage: statistics.median(run[stage] for run in runs) for stage in ALL_STAGES}
    result["reference"] = statistics.median(references)
    store = LocalFileStore(root / f"{label}-rss")
    result["peak_rss"], result["rss_growth"] = peak_rss_of(lambda: ingest_once(path, store, "sheet-rss"))
    return result


def print_table(results: dict[str, dict[str, float]], sizes: dict[str, int]) -> None:
    labels = list(results)
    print(f"{'stage (median s)':<24}" + "".join(f"{label:>10}" for label in labels))
    for stage in ALL_STAGES:
        print(f"{stage:<24}" + "".join(f"{results[label][stage]:>10.3f}" for label in labels))
    rows: list[tuple[str, Callable[[dict[str, float]], float], str]] = [
        ("core total (target 3 s)", lambda r: sum(r[s] for s in CORE_STAGES), ".3f"),
        ("total incl. storage", lambda r: sum(r[s] for s in ALL_STAGES), ".3f"),
        ("Pillow decode (ref.)", lambda r: r["reference"], ".3f"),
        ("core / Pillow decode", lambda r: sum(r[s] for s in CORE_STAGES) / r["reference"], ".2f"),
        ("decode / Pillow decode", lambda r: r["decode+normalise"] / r["reference"], ".2f"),
        ("peak RSS (MiB)", lambda r: r["peak_rss"], ".0f"),
        ("peak RSS growth (MiB)", lambda r: r["rss_growth"], ".0f"),
    ]
    for title, value, spec in rows:
        print(f"{title:<24}" + "".join(f"{value(results[label]):>10{spec}}" for label in labels))
    print("file size (MB)          " + "".join(f"{sizes[label] / 1e6:>10.1f}" for label in labels))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    arguments = parser.parse_args()
    print(
        f"libvips {pyvips.version(0)}.{pyvips.version(1)}.{pyvips.version(2)}, concurrency {pyvips.concurrency_get()}"
    )
    with tempfile.TemporaryDirectory(prefix="bench-ingest-") as temp:
        root = Path(temp)
        inputs = write_inputs(root)
        sizes = {label: path.stat().st_size for label, path in inputs.items()}
        results = {label: bench_format(label, path, root, arguments.repeat) for label, path in inputs.items()}
    print_table(results, sizes)


if __name__ == "__main__":
    main()
