"""Demo archive drawing speed: one sheet of each kind at the product's 200 dpi.

Run: ``.venv/bin/python bench/bench_demo.py``. Prints the best of three runs per sheet (seconds, megapixels per
second) and its ratio to a fixed numpy/SciPy reference timed in the same process: a Gaussian blur (sigma 2 px) of
a noise image of the same size, which tracks the machine's speed at this kind of array work.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable

import numpy as np
from scipy import ndimage

from tracedesk.demo.scenarios import demo_sheets

DPI = 200.0
REPEATS = 3
KEYS = ("level-w10", "pressure-d14", "decay-run3")


def _best_seconds(work: Callable[[], object]) -> float:
    best = math.inf
    for _ in range(REPEATS):
        start = time.perf_counter()
        work()
        best = min(best, time.perf_counter() - start)
    return best


def _reference(shape: tuple[int, int]) -> Callable[[], object]:
    noise = np.random.default_rng(1).standard_normal((*shape, 3)).astype(np.float32)
    return lambda: ndimage.gaussian_filter(noise, sigma=(2.0, 2.0, 0.0))


def main() -> None:
    print(f"{'sheet':<16} {'size (px)':>12} {'seconds':>8} {'Mpx/s':>7} {'x reference':>12}")
    for sheet in demo_sheets():
        if sheet.key not in KEYS:
            continue
        sheet.render(20.0)  # warm-up (imports, font cache) at a tiny size
        seconds = _best_seconds(lambda sheet=sheet: sheet.render(DPI))
        image = sheet.render(DPI).image
        reference = _best_seconds(_reference(image.shape[:2]))
        megapixels = image.shape[0] * image.shape[1] / 1e6
        size = f"{image.shape[1]}x{image.shape[0]}"
        print(f"{sheet.key:<16} {size:>12} {seconds:8.2f} {megapixels / seconds:7.2f} {seconds / reference:12.1f}")


if __name__ == "__main__":
    main()
