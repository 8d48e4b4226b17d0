"""Per-sheet costs of the archive, measured end to end through the ingest service, for capacity planning.

Run: .venv/bin/python bench/bench_sheet_costs.py [--sheets 5]

Ingests synthetic A4 scans at 600 dpi (7000 x 5000, JPEG quality 90, the same generator as bench_ingest.py) into
a temp archive (SQLite + local files) and reports per sheet: bytes of the original, bytes of derived files
(normalised image, pyramid, thumbnail), CPU seconds of the ingest (process time, all threads), database rows
added, audit events. Then it scales the figures to an archive of 1,000,000 sheets.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

from sqlalchemy import func, select

from bench.bench_ingest import synthetic_scan
from tracedesk.app import build_state
from tracedesk.archive.ingest import ReceivedFile, ingest_received
from tracedesk.archive.schemas import CollectionCreate
from tracedesk.archive.service import create_collection
from tracedesk.audit.service import SYSTEM
from tracedesk.config import Settings
from tracedesk.db import transaction
from tracedesk.maintenance.inventory import row_counts
from tracedesk.models import AuditEvent
from tracedesk.storage import sha256_of_file


def folder_bytes(path: Path) -> int:
    return sum(item.stat().st_size for item in path.rglob("*") if item.is_file())


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sheets", type=int, default=5)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as temp:
        folder = Path(temp)
        state = build_state(Settings(environment="test", data_dir=folder / "data"))
        with transaction(state.writer) as session:
            collection_id = create_collection(session, CollectionCreate(name="Costs"), actor=SYSTEM).id
        rows_before = sum(row_counts(state.engine).values())
        cpu = wall = 0.0
        originals = 0
        for index in range(args.sheets):
            path = folder / f"scan-{index}.jpg"
            image = synthetic_scan()
            image.draw_rect([index * 10, 0, 0], 0, 0, 40, 40, fill=True).jpegsave(str(path), Q=90)
            originals += path.stat().st_size
            received = ReceivedFile(path, path.name, "image/jpeg", sha256_of_file(path), path.stat().st_size)
            cpu_start, wall_start = time.process_time(), time.perf_counter()
            ingest_received(state, collection_id, SYSTEM, received)
            cpu += time.process_time() - cpu_start
            wall += time.perf_counter() - wall_start
        derived = folder_bytes(state.settings.files_dir / "derived")
        rows = sum(row_counts(state.engine).values()) - rows_before
        with transaction(state.reader) as session:
            events = session.scalar(select(func.count()).select_from(AuditEvent)) or 0
        database = (folder / "data" / "tracedesk.sqlite3").stat().st_size
        n = args.sheets
        print("| per sheet (7000 x 5000 JPEG scan) | measured |")
        print("|---|---|")
        print(f"| original | {originals / n / 2**20:.1f} MiB |")
        label = "derived files (pyramid, thumbnail; rendered image for PDF pages only)"
        print(f"| {label} | {derived / n / 2**20:.1f} MiB |")
        print(f"| ingest CPU (all threads) / wall time | {cpu / n:.2f} s / {wall / n:.2f} s |")
        print(f"| database rows added / audit events | {rows / n:.1f} / {events / n:.1f} |")
        print(f"| SQLite file after {n} sheets | {database / 2**10:.0f} KiB |")
        total = (originals + derived) / n * 1_000_000 / 2**40
        print(
            f"\n1,000,000 sheets: about {total:.1f} TiB of files and {cpu / n * 1e6 / 3600:.0f} CPU-hours of ingest"
            f" ({cpu / n * 1e6 / 3600 / 24 / 16:.1f} days on 16 cores)."
        )
        state.engine.dispose()


if __name__ == "__main__":
    main()
