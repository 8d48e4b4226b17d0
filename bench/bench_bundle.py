"""Cost of the collection bundle per sheet, which decides how many sheets are bundled while a request waits.

Run: .venv/bin/python -m bench.bench_bundle [--sheets 3]

Uploads synthetic A4 scans at 600 dpi (7000 x 5000, JPEG quality 90, the generator of bench_ingest.py) into a temp
archive (SQLite + local files), calibrates each, adds a 2,000-vertex trace with a polynomial fit, then builds the
bundle at the default picture size (4000 px): once as the synchronous download does (``build_bundle``) and once as
a background job through the API (queued, built, stored, audited). Reports wall and CPU seconds (this process;
image decoding runs in a helper process and is in the wall time only) and the ZIP's size.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
from fastapi.testclient import TestClient

from bench.bench_ingest import synthetic_scan
from tracedesk.accounts.service import create_user
from tracedesk.app import build_state, create_app
from tracedesk.archive.service import get_collection
from tracedesk.audit.service import SYSTEM
from tracedesk.config import Settings
from tracedesk.db import transaction
from tracedesk.exports.bundle import BundleOptions, build_bundle
from tracedesk.exports.selection import collection_sheets

PASSWORD = "bench password for bundles"
# Chart box of the synthetic scan (pixels) and the values at its corners (hours, metres).
CORNERS = [((500.0, 4500.0), (0.0, 0.0)), ((6500.0, 4500.0), (24.0, 0.0)), ((6500.0, 500.0), (24.0, 10.0))]
CORNERS += [((500.0, 500.0), (0.0, 10.0))]


def _digitized_sheet(client: TestClient, collection_id: int, path: Path) -> None:
    files = [("files", (path.name, path.read_bytes(), "image/jpeg"))]
    sheet_id = client.post(f"/api/v1/collections/{collection_id}/sheets", files=files).json()["sheets"][0]["id"]
    calibration = {
        "kind": "cartesian",
        "x_axis": {"scale": "time", "start": "2020-01-01T00:00:00Z"},
        "y_axis": {"scale": "linear", "unit": "m"},
        "control_points": [{"pixel": list(pixel), "value": list(value)} for pixel, value in CORNERS],
    }
    assert client.put(f"/api/v1/sheets/{sheet_id}/calibration", json=calibration).status_code in (200, 201)
    u = np.linspace(500.0, 6500.0, 2000)
    body = {"name": "level", "unit": "m", "vertices": np.column_stack([u, 2500 + 1500 * np.sin(u / 700)]).tolist()}
    trace = client.post(f"/api/v1/sheets/{sheet_id}/traces", json=body).json()
    assert client.post(f"/api/v1/traces/{trace['id']}/fits", json={"family": "polynomial", "degree": 5}).is_success


def _signed_in(client: TestClient) -> TestClient:
    answer = client.post("/api/v1/session", json={"username": "bea", "password": PASSWORD}).json()
    client.headers["X-CSRF-Token"] = answer["csrf_token"]
    return client


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sheets", type=int, default=3)
    args = parser.parse_args()
    n = args.sheets
    with tempfile.TemporaryDirectory() as temp:
        folder = Path(temp)
        settings = Settings(environment="test", data_dir=folder / "data", secret_key="bench-" + "x" * 40)
        state = build_state(settings)
        with transaction(state.writer) as session:
            create_user(session, state.hasher, actor=SYSTEM, username="bea", password=PASSWORD, role="admin")
        with TestClient(create_app(settings, state=state)) as client:
            _signed_in(client)
            collection_id = client.post("/api/v1/collections", json={"name": "Bench"}).json()["id"]
            for index in range(n):
                path = folder / f"scan-{index}.jpg"
                synthetic_scan().draw_rect([index * 10, 0, 0], 0, 0, 40, 40, fill=True).jpegsave(str(path), Q=90)
                _digitized_sheet(client, collection_id, path)
            with transaction(state.reader) as session:
                collection = get_collection(session, collection_id)
                sheets = collection_sheets(session, collection_id, None)
                cpu, wall = time.process_time(), time.perf_counter()
                options = BundleOptions()
                result = build_bundle(session, state.store, collection, sheets, generated_by="Bea", options=options)
                cpu, wall = time.process_time() - cpu, time.perf_counter() - wall
                result.path.unlink()
            job_wall = time.perf_counter()
            job_id = client.post(f"/api/v1/collections/{collection_id}/bundles", json={}).json()["id"]
            while (job := client.get(f"/api/v1/jobs/{job_id}").json())["status"] not in {"succeeded", "failed"}:
                time.sleep(0.05)
            job_wall = time.perf_counter() - job_wall
            assert job["status"] == "succeeded", job
        state.dispatcher.shutdown()
        state.engine.dispose()
    print(f"bundle of {n} sheets (7000 x 5000 JPEG scans, a 2,000-vertex trace and a fit each, 4000 px pictures)")
    size = result.size / n / 1e6
    print(f"  built while waiting: {wall / n:.2f} s wall, {cpu / n:.2f} s CPU per sheet; {size:.1f} MB per sheet")
    print(f"  as a background job (built, stored, audited): {job_wall / n:.2f} s wall per sheet")


if __name__ == "__main__":
    main()
