"""A whole batch run over A4 scans at 600 dpi (7000 x 5000 px), through the product's own job path.

Run: .venv/bin/python -m bench.bench_batch [--sheets 100] [--parallel 2] [--max-minutes 30]

Builds a temp archive (SQLite + local files + in-process jobs, ``job_threads`` 2), ingests ``--sheets`` JPEG scans
(quality 90) of the chart of bench/bench_registration.py (1 mm grid turned by 1.7 degrees, a blue pen, a stain,
scanner noise), each shifted by a few pixels so no two sheets are alike, saves the chart spec, and starts
``--parallel`` batch runs over equal selections of the sheets (one job each: a run works through its sheets one
after another, so two runs are how a 2-core machine is kept busy). Each sheet is registered from the printed grid,
its pen traced, a Fourier fit made, scored, and its task submitted for review or queued, as in production.

The batch phase stops at ``--max-minutes`` (count- and time-limited): then the sheets done so far give the rate
and the time for the rest is extrapolated, and the output says so. Prints the setup (ingest) time, the batch
wall time, sheets per minute, the median per-sheet time of each run, the verdicts, and the worst fit error
against the drawn pen (y = 90 - 50 sin(x / 3), from bench_registration's generator).
"""

from __future__ import annotations

import argparse
import json
import math
import os
import statistics
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray
from PIL import Image
from sqlalchemy import select

from bench.bench_registration import SPEC, make_sheet
from tracedesk.app import build_state
from tracedesk.archive.ingest import ReceivedFile, ingest_received
from tracedesk.archive.schemas import CollectionCreate
from tracedesk.archive.service import create_collection
from tracedesk.audit.service import SYSTEM
from tracedesk.config import Settings
from tracedesk.db import transaction
from tracedesk.digitizing.batch import batch_run_read, start_batch_run
from tracedesk.digitizing.batch_schemas import BatchPen, BatchRunCreate
from tracedesk.digitizing.chart_specs import create_chart_spec
from tracedesk.digitizing.schemas import ChartSpecCreate
from tracedesk.models import BatchRunItem, Fit, Sheet
from tracedesk.storage import sha256_of_file
from tracedesk.web.state import AppState

PEN = "#1f3cc8"
FIT = {"family": "fourier", "degree": 1, "period": 6 * math.pi}


def _scan(base: NDArray[np.uint8], index: int, folder: Path) -> Path:
    """The base sheet moved by a few pixels (a different placement on the scanner), saved as JPEG 90; a mark in the
    margin that encodes ``index`` keeps every file distinct (the archive refuses exact duplicates)."""
    shift = (index // 11 % 11 - 5, index % 11 - 5)
    sheet = np.roll(base, shift, axis=(0, 1))
    sheet[8:16, 8 : 8 + 8 * 16] = 255
    for bit in range(16):
        if index >> bit & 1:
            sheet[8:16, 8 + 8 * bit : 16 + 8 * bit] = 90
    path = folder / f"sheet-{index:04d}.jpg"
    Image.fromarray(sheet).save(path, quality=90)
    return path


def _ingest(state: AppState, collection_id: int, count: int, folder: Path) -> list[int]:
    base = make_sheet()
    for index in range(count):
        path = _scan(base, index, folder)
        received = ReceivedFile(path, path.name, "image/jpeg", sha256_of_file(path), path.stat().st_size)
        ingest_received(state, collection_id, SYSTEM, received)
        path.unlink()
    with transaction(state.reader) as session:
        return list(session.scalars(select(Sheet.id).where(Sheet.collection_id == collection_id).order_by(Sheet.id)))


def _start_runs(state: AppState, collection_id: int, spec_id: int, sheets: list[int], parallel: int) -> list[int]:
    runs = []
    for part in range(parallel):
        body = BatchRunCreate(
            chart_spec_id=spec_id,
            pens=[BatchPen(name="pen", pen_color=PEN, unit="mm")],
            fit=FIT,
            sheet_ids=sheets[part::parallel],
        )
        runs.append(start_batch_run(state, collection_id, body, actor=SYSTEM).id)
    return runs


def _done(state: AppState, runs: list[int]) -> tuple[int, list[list[float]]]:
    """Sheets finished so far, and each run's finishing times (s since the epoch)."""
    finished: list[list[float]] = []
    with transaction(state.reader) as session:
        for run in runs:
            items = session.scalars(select(BatchRunItem).where(BatchRunItem.run_id == run))
            finished.append(sorted(i.finished_at.timestamp() for i in items if i.finished_at is not None))
    return sum(len(times) for times in finished), finished


@dataclass(frozen=True)
class BatchPhase:
    """Wall and CPU seconds of the batch phase (this process's threads and its finished child processes, such as the
    image decoders), sheets done, finishing times per run."""

    wall_s: float
    cpu_s: float
    done: int
    stamps: list[list[float]]


def _cpu_seconds() -> float:
    times = os.times()
    return times.user + times.system + times.children_user + times.children_system


def _wait(state: AppState, runs: list[int], total: int, max_seconds: float) -> BatchPhase:
    start, cpu_start, started_at = time.perf_counter(), _cpu_seconds(), time.time()
    while True:
        done, finished = _done(state, runs)
        elapsed = time.perf_counter() - start
        if done >= total or elapsed > max_seconds:
            stamps = [[started_at, *times] for times in finished]
            return BatchPhase(elapsed, _cpu_seconds() - cpu_start, done, stamps)
        time.sleep(1.0)


def _fit_error(state: AppState) -> float:
    """Largest error (chart units) of the fitted mean and amplitude against the drawn pen (90 and -50)."""
    worst = 0.0
    with transaction(state.reader) as session:
        for result in session.scalars(select(Fit.result)):
            coefficients = json.loads(result)["parameters"]
            worst = max(worst, abs(coefficients["a0"] - 90.0), abs(coefficients["b1"] + 50.0))
    return worst


def _report(state: AppState, runs: list[int], sheets: int, phase: BatchPhase) -> None:
    done = phase.done
    per_sheet = [statistics.median(np.diff(times)) for times in phase.stamps if len(times) > 1]
    rate = done / phase.wall_s * 60.0
    print(f"batch phase: {done} of {sheets} sheets in {phase.wall_s:.0f} s wall ({rate:.1f} sheets per minute)")
    print(f"median time per sheet within a run: {', '.join(f'{t:.1f} s' for t in per_sheet)}")
    cpu = phase.cpu_s / max(done, 1)
    print(
        f"CPU time (all threads, and the decoder processes): {cpu:.1f} s per sheet; {sheets} sheets need "
        f"{cpu * sheets / 60:.1f} CPU-minutes, so at least {cpu * sheets / 120:.1f} min on 2 otherwise idle cores"
    )
    if done < sheets:
        print(
            f"time limit reached: the remaining {sheets - done} sheets would take about "
            f"{(sheets - done) / rate:.1f} min more at this rate (extrapolated, not measured)"
        )
    with transaction(state.reader) as session:
        counts = [batch_run_read(session, run).counts for run in runs]
    print("verdicts per run:", counts)
    print(f"largest fit error against the drawn pen: {_fit_error(state):.4f} chart units (of 180)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sheets", type=int, default=100)
    parser.add_argument("--parallel", type=int, default=2, help="batch runs started side by side")
    parser.add_argument("--max-minutes", type=float, default=30.0)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as temp:
        folder = Path(temp)
        state = build_state(Settings(environment="test", data_dir=folder / "data", job_threads=2))
        with transaction(state.writer) as session:
            collection_id = create_collection(session, CollectionCreate(name="Bench batch"), actor=SYSTEM).id
            spec = ChartSpecCreate(name="A4 1 mm grid", geometry=SPEC, collection_id=collection_id)
            spec_id = create_chart_spec(session, spec, actor=SYSTEM).id
        setup = time.perf_counter()
        sheets = _ingest(state, collection_id, args.sheets, folder)
        print(f"{len(sheets)} sheets of 7000 x 5000 px ingested in {time.perf_counter() - setup:.0f} s (setup)")
        runs = _start_runs(state, collection_id, spec_id, sheets, args.parallel)
        phase = _wait(state, runs, len(sheets), args.max_minutes * 60.0)
        _report(state, runs, len(sheets), phase)
        load = ", ".join(f"{value:.1f}" for value in os.getloadavg())
        print(f"machine: {os.cpu_count()} cores, load average {load}; {args.parallel} runs side by side")
        if phase.done < len(sheets):
            os._exit(0)  # the in-process job threads are still working; stop them with the process
        state.dispatcher.shutdown()
        state.engine.dispose()


if __name__ == "__main__":
    main()
