"""Workflow costs that grow with the data: hashing a sheet's record for a signature, comparing two digitizations,
and writing the raw-vertices CSV, for traces of 20,000 and 200,000 vertices (the API's limit).

Run: ``.venv/bin/python bench/bench_workflow.py``. Prints the best of five runs and each figure's ratio to a
reference timed in the same process: plain ``json.dumps`` of the same vertex list (record hash, CSV) and
``np.interp`` of one trace at the other's samples (agreement).
"""

from __future__ import annotations

import hashlib
import json
import math
import time
from collections.abc import Callable
from functools import partial

import numpy as np

from tracedesk.exports.csv_cells import write_csv
from tracedesk.workflow.agreement import compare_traces
from tracedesk.workflow.record import canonical_bytes

REPEATS = 5


def _best_seconds(work: Callable[[], object]) -> float:
    best = math.inf
    for _ in range(REPEATS):
        start = time.perf_counter()
        work()
        best = min(best, time.perf_counter() - start)
    return best


def _record(vertices: list[list[float]]) -> dict[str, object]:
    trace = {"id": 1, "version": 3, "name": "level", "unit": "m", "line_width_px": 2.0, "vertices": vertices}
    return {"format": "tracedesk.sheet-record/1", "calibration": None, "traces": [trace], "fits": []}


def _line(count: int, task: str, seconds: float, reference: float) -> None:
    print(f"{count:>9} {task:<28} {seconds:>9.4f} {reference:>10.4f} {seconds / reference:>6.2f}")


def _hash_record(vertices: list[list[float]]) -> str:
    return hashlib.sha256(canonical_bytes(_record(vertices))).hexdigest()


def main() -> None:
    rng = np.random.default_rng(11)
    print(f"{'vertices':>9} {'task':<28} {'seconds':>9} {'reference':>10} {'ratio':>6}")
    for count in (20_000, 200_000):
        u = np.sort(rng.uniform(0, 7000, count))
        v = 2500 + 800 * np.sin(u / 300) + rng.normal(0, 0.5, count)
        v2 = v + rng.normal(0, 0.7, count)
        vertices = np.column_stack([u, v]).tolist()
        rows = [[i + 1, a, b] for i, (a, b) in enumerate(vertices)]
        reference = _best_seconds(partial(json.dumps, vertices))
        _line(count, "record hash (canonical JSON)", _best_seconds(partial(_hash_record, vertices)), reference)
        _line(count, "vertices CSV", _best_seconds(partial(write_csv, ["vertex", "u [px]", "v [px]"], rows)), reference)
        interp = _best_seconds(partial(np.interp, u, u, v2))
        _line(count, "agreement (max, RMS)", _best_seconds(partial(compare_traces, u, v, u + 0.25, v2)), interp)


if __name__ == "__main__":
    main()
