"""Fitting benchmark: speed on 100,000 samples and digits correct on NIST StRD Wampler1-5.

Run as ``.venv/bin/python bench/bench_fitting.py``. Prints two tables:

1. Times (best of 15 runs, interleaved with the reference, milliseconds) of our polynomial and
   Fourier fits on 100,000 samples, with the reference run in the same process:
   ``numpy.polynomial.Polynomial.fit`` for polynomials; for Fourier series ``numpy.linalg.lstsq`` on the
   design matrix written in plain numpy (``cos(k theta)``, ``sin(k theta)`` column by column), and
   ``Polynomial.fit`` with as many coefficients. Our fits also compute the serial-correlation-robust
   covariance, the statistics and a 5-fold cross-validated RMSE; the references do not.
2. Log relative error (LRE, correct significant digits, capped at 15) of the worst coefficient on
   NIST StRD Wampler1-5 (generated from their defining formulas), ours vs
   ``numpy.polynomial.Polynomial.fit(x, y, 5).convert()``.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable

import numpy as np
from numpy.polynomial import Polynomial

from tracedesk.science.fit_fourier import fit_fourier
from tracedesk.science.fit_polynomial import fit_polynomial

SAMPLES = 100_000
REPEATS = 15
BUDGET_MS = 50.0


def best_times_ms(ours: Callable[[], object], reference: Callable[[], object]) -> tuple[float, float]:
    """Best wall times (milliseconds) of REPEATS runs of each, interleaved so that load from other
    processes on the machine hits both alike; one warm-up run each first."""
    ours()
    reference()
    ours_times, reference_times = [], []
    for _ in range(REPEATS):
        for action, times in ((ours, ours_times), (reference, reference_times)):
            start = time.perf_counter()
            action()
            times.append(time.perf_counter() - start)
    return 1e3 * min(ours_times), 1e3 * min(reference_times)


def plain_fourier_design(x: np.ndarray, *, degree: int, period: float) -> np.ndarray:
    """The Fourier design matrix as one writes it in plain numpy: ``1, cos(k theta), sin(k theta)``."""
    theta = 2.0 * np.pi * x / period
    columns = [np.ones_like(x)]
    for k in range(1, degree + 1):
        columns += [np.cos(k * theta), np.sin(k * theta)]
    return np.column_stack(columns)


def row(label: str, ours: float, reference: float, name: str) -> str:
    return f"{label:<24}{ours:>10.1f}{reference:>14.1f}{ours / reference:>10.2f}  {name}"


def speed_table() -> None:
    rng = np.random.default_rng(2024)
    x = np.sort(rng.uniform(0.0, 24.0 * 30, SAMPLES))  # a month of hourly-scale chart time
    y = 12.0 + 4.0 * np.sin(2 * np.pi * x / 24.0) + 0.002 * x + rng.normal(0.0, 0.3, SAMPLES)
    print(f"Fits on {SAMPLES:,} samples (best of {REPEATS}, interleaved; budget {BUDGET_MS:.0f} ms)")
    print(f"{'model':<24}{'ours ms':>10}{'reference ms':>14}{'ours/ref':>10}  reference")
    for degree in (1, 3, 5, 9, 15):
        ours, reference = best_times_ms(
            lambda d=degree: fit_polynomial(x, y, degree=d), lambda d=degree: Polynomial.fit(x, y, d)
        )
        print(row(f"polynomial degree {degree}", ours, reference, "numpy.polynomial.Polynomial.fit"))
    for degree in (1, 3, 5):
        ours, reference = best_times_ms(
            lambda d=degree: fit_fourier(x, y, degree=d, period=24.0),
            lambda d=degree: np.linalg.lstsq(plain_fourier_design(x, degree=d, period=24.0), y, rcond=None),
        )
        print(row(f"fourier degree {degree}, P=24", ours, reference, "numpy.linalg.lstsq, same model"))
        ours, reference = best_times_ms(
            lambda d=degree: fit_fourier(x, y, degree=d, period=24.0), lambda d=degree: Polynomial.fit(x, y, 2 * d)
        )
        print(row("", ours, reference, f"Polynomial.fit with as many coefficients ({2 * degree + 1})"))


def log_relative_error(values: np.ndarray, certified: np.ndarray) -> float:
    """Smallest number of correct significant digits over the coefficients (NIST's LRE, capped at 15)."""
    relative = np.abs(values - certified) / np.abs(certified)
    worst = float(relative.max())
    return 15.0 if worst == 0.0 else min(15.0, -math.log10(worst))


def accuracy_table() -> None:
    x = np.arange(21.0)
    # The pattern is symmetric about x = 10 (NIST StRD Wampler3 data listing minus Wampler1).
    half = [759, -2048, 2048, -2048, 2523, -2048, 2048, -2048, 1838, -2048, 2048]
    e = np.array(half + half[-2::-1], dtype=float)
    wampler1 = sum(x**k for k in range(6))
    cases = {
        "Wampler1": (wampler1, np.ones(6)),
        "Wampler2": (sum(0.1**k * x**k for k in range(6)), 0.1 ** np.arange(6)),
        "Wampler3": (wampler1 + e, np.ones(6)),
        "Wampler4": (wampler1 + 100 * e, np.ones(6)),
        "Wampler5": (wampler1 + 10000 * e, np.ones(6)),
    }
    print("\nDigits correct (LRE of the worst coefficient) on NIST StRD Wampler1-5, degree 5")
    print(f"{'data set':<12}{'ours':>8}{'numpy':>8}")
    for name, (y, certified) in cases.items():
        ours = np.array(fit_polynomial(x, y, degree=5).parameters)
        reference = Polynomial.fit(x, y, 5).convert().coef
        print(f"{name:<12}{log_relative_error(ours, certified):>8.1f}{log_relative_error(reference, certified):>8.1f}")


if __name__ == "__main__":
    speed_table()
    accuracy_table()
