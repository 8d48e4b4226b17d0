"""Bounded load test on loopback: simulated technicians saving trace edits and reading tiles.

Usage: .venv/bin/python -m bench.bench_load [--users 50] [--seconds 60] [--warmup 5] [--think 1] [--postgres URL]
       [--split-cores]

Each technician saves about once a second (``--think``), like the workbench's autosave. Starts the real server
(uvicorn subprocess on 127.0.0.1, a temp data folder), prepares one sheet with a calibration and one trace per
technician, then runs every technician as a loop of "save my trace (PATCH with If-Match)" and "read a tile"
until the time is up; their first requests are spread over one think time, and the first ``--warmup`` seconds are
not measured. Reports p50/p95/p99 per request kind, the error rate (all requests), and checks that the audit trail
holds exactly one update event per acknowledged save (0 lost writes).
Everything stays on the loopback interface and stops by itself (count- and time-limited).
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import socket
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import httpx
import numpy as np
from sqlalchemy import func, select

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tests.archive.scans import png_bytes  # noqa: E402

from tracedesk.accounts.service import create_api_token, create_user  # noqa: E402
from tracedesk.app import build_state  # noqa: E402
from tracedesk.audit.service import SYSTEM  # noqa: E402
from tracedesk.config import Settings  # noqa: E402
from tracedesk.db import transaction  # noqa: E402
from tracedesk.migrate import upgrade_database  # noqa: E402
from tracedesk.models import AuditEvent  # noqa: E402

MAX_REQUESTS_PER_USER = 100_000
EDIT_VARIANTS = 16


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def prepare(settings: Settings, users: int) -> list[str]:
    state = build_state(settings, migrate=False)
    upgrade_database(state.engine)
    tokens = []
    with transaction(state.writer) as session:
        for index in range(users):
            user = create_user(
                session,
                state.hasher,
                actor=SYSTEM,
                username=f"tech{index:03d}",
                password="load test password",
                role="technician",
            )
            tokens.append(create_api_token(session, user, name="load", actor=SYSTEM)[0])
    state.engine.dispose()
    return tokens


def start_server(settings: Settings, port: int, workers: int, cpus: set[int] | None) -> subprocess.Popen[bytes]:
    env = {
        **os.environ,
        "TRACEDESK_DATA_DIR": str(settings.data_dir),
        "TRACEDESK_ENVIRONMENT": "test",
        "TRACEDESK_DATABASE_URL": settings.resolved_database_url,
        "OPENBLAS_NUM_THREADS": "1",
    }
    command = [
        sys.executable,
        "-m",
        "uvicorn",
        "tracedesk.asgi:app",
        "--host",
        "127.0.0.1",
        "--port",
        str(port),
        "--workers",
        str(workers),
        "--log-level",
        "warning",
    ]
    log = open(Path(tempfile.gettempdir()) / f"tracedesk-bench-server-{port}.log", "wb")  # noqa: SIM115 - lives as long as the server
    # With --split-cores the server (and its workers, which inherit it) keeps to its own cores, as if the
    # technicians' browsers were on other machines; the generator takes the rest.
    pin = (lambda: os.sched_setaffinity(0, cpus)) if cpus else None
    server = subprocess.Popen(command, env=env, stdout=log, stderr=subprocess.STDOUT, preexec_fn=pin)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        try:
            if httpx.get(f"http://127.0.0.1:{port}/api/v1/health", timeout=1).status_code == 200:
                return server
        except httpx.HTTPError:
            time.sleep(0.2)
    server.kill()
    raise SystemExit("the server did not start")


def seed_sheet(base: str, token: str, users: int, tokens: list[str]) -> tuple[int, list[int]]:
    headers = {"Authorization": f"Bearer {token}"}
    with httpx.Client(base_url=base, headers=headers, timeout=60) as client:
        collection = client.post("/api/v1/collections", json={"name": "Load"}).json()["id"]
        files = [("files", ("load.png", png_bytes(width=1600, height=1000), "image/png"))]
        sheet = client.post(f"/api/v1/collections/{collection}/sheets", files=files).json()["sheets"][0]["id"]
        points = [
            {"pixel": [u, v], "value": [x, y]}
            for u, v, x, y in [(100, 900, 0, 0), (1500, 900, 24, 0), (1500, 100, 24, 10), (100, 100, 0, 10)]
        ]
        client.put(
            f"/api/v1/sheets/{sheet}/calibration",
            json={
                "kind": "cartesian",
                "x_axis": {"scale": "time"},
                "y_axis": {"scale": "linear"},
                "control_points": points,
            },
        )
    trace_ids = []
    for index in range(users):
        with httpx.Client(base_url=base, headers={"Authorization": f"Bearer {tokens[index]}"}, timeout=60) as client:
            vertices = np.column_stack([np.linspace(110, 1490, 200), np.full(200, 500.0)]).tolist()
            trace_ids.append(
                client.post(
                    f"/api/v1/sheets/{sheet}/traces", json={"name": f"pen {index}", "vertices": vertices}
                ).json()["id"]
            )
    return sheet, trace_ids


async def technician(
    base: str,
    token: str,
    sheet: int,
    trace_id: int,
    window: tuple[float, float],
    think: float,
    timings: dict[str, list[float]],
    errors: list[str],
    saves: list[int],
) -> None:
    measure_from, until = window  # time.monotonic() values: requests before measure_from are the warm-up
    rng = np.random.default_rng(trace_id)
    headers = {"Authorization": f"Bearer {token}", "Content-Type": "application/json"}
    # Edits are encoded once, up front, and taken in turn (each differs from the one before, so every save makes
    # a new version): the generator shares the machine's cores with the server and should spend them on sending.
    edits = [
        json.dumps({"vertices": np.column_stack([np.linspace(110, 1490, 200), 500 + rng.normal(0, 3, 200)]).tolist()})
        for _ in range(EDIT_VARIANTS)
    ]
    async with httpx.AsyncClient(base_url=base, headers=headers, timeout=30) as client:
        # People do not all start at the same instant: spread the first requests over one think time.
        await asyncio.sleep(float(rng.uniform(0.0, max(think, 0.1))))
        etag = (await client.get(f"/api/v1/traces/{trace_id}")).headers["etag"]
        for count in range(MAX_REQUESTS_PER_USER):
            if time.monotonic() >= until:
                return
            started = time.perf_counter()
            response = await client.patch(
                f"/api/v1/traces/{trace_id}", content=edits[count % EDIT_VARIANTS], headers={"If-Match": etag}
            )
            if time.monotonic() >= measure_from:
                timings["save"].append(time.perf_counter() - started)
            if response.status_code == 200:
                etag = response.headers["etag"]
                saves.append(trace_id)
            else:
                errors.append(f"save {response.status_code}")
            started = time.perf_counter()
            try:
                tile = await client.get(f"/api/v1/sheets/{sheet}/tiles/sheet_files/10/{rng.integers(0, 3)}_0.jpg")
            except httpx.HTTPError as error:
                errors.append(f"tile {type(error).__name__}")
                continue
            if time.monotonic() >= measure_from:
                timings["tile"].append(time.perf_counter() - started)
            if tile.status_code != 200:
                errors.append(f"tile {tile.status_code}")
            # A person edits between autosaves; think=0 turns the run into a closed-loop stress test.
            await asyncio.sleep(float(rng.uniform(0.5, 1.5)) * think)


def percentile(values: list[float], q: float) -> float:
    return float(np.percentile(np.asarray(values) * 1000, q)) if values else float("nan")


@dataclass(frozen=True)
class Load:
    """What one run offers: technicians, measured seconds after a warm-up, mean think time between saves."""

    users: int
    seconds: float
    warmup: float
    think: float


def run(label: str, settings: Settings, load: Load, workers: int, server_cpus: set[int] | None) -> None:
    users, seconds, think = load.users, load.seconds, load.think
    tokens = prepare(settings, users)
    port = free_port()
    server = start_server(settings, port, workers, server_cpus)
    base = f"http://127.0.0.1:{port}"
    try:
        sheet, trace_ids = seed_sheet(base, tokens[0], users, tokens)
        timings: dict[str, list[float]] = {"save": [], "tile": []}
        errors: list[str] = []
        saves: list[int] = []
        measure_from = time.monotonic() + load.warmup
        until = measure_from + seconds

        async def everyone() -> None:
            await asyncio.gather(
                *(
                    technician(
                        base, tokens[i], sheet, trace_ids[i], (measure_from, until), think, timings, errors, saves
                    )
                    for i in range(users)
                )
            )

        asyncio.run(everyone())
    finally:
        server.terminate()
        server.wait(timeout=30)
        log_path = Path(tempfile.gettempdir()) / f"tracedesk-bench-server-{port}.log"
        problems = [line for line in log_path.read_text(errors="replace").splitlines() if "Error" in line]
        if problems:
            print(f"server log of {label}: {len(problems)} error line(s), first: {problems[0][:200]}")
    state = build_state(settings, migrate=False)
    with transaction(state.reader) as session:
        audited = (
            session.scalar(
                select(func.count())
                .select_from(AuditEvent)
                .where(AuditEvent.entity_type == "trace", AuditEvent.action == "update")
            )
            or 0
        )
    state.engine.dispose()
    total = 2 * len(saves) + len(errors)  # every request, warm-up included: a save and a tile read per round
    print(
        f"| {label} | {users} | {seconds:.0f} | "
        f"{percentile(timings['save'], 50):.1f} / {percentile(timings['save'], 95):.1f} / "
        f"{percentile(timings['save'], 99):.1f} | "
        f"{percentile(timings['tile'], 50):.1f} / {percentile(timings['tile'], 95):.1f} / "
        f"{percentile(timings['tile'], 99):.1f} | {len(saves)} | {len(errors)}/{total} | "
        f"{'0' if audited == len(saves) else f'MISMATCH {audited} audited'} |"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--users", type=int, default=50)
    parser.add_argument("--seconds", type=float, default=60.0, help="measured seconds (after the warm-up)")
    parser.add_argument("--warmup", type=float, default=5.0, help="seconds of load before measuring starts")
    parser.add_argument(
        "--think",
        type=float,
        default=1.0,
        help="mean seconds a technician spends between two autosaves (0: closed-loop stress)",
    )
    parser.add_argument(
        "--postgres",
        default=os.environ.get("TRACEDESK_TEST_POSTGRES_URL"),
        help="a PostgreSQL URL of an empty database or schema (optional)",
    )
    parser.add_argument(
        "--split-cores",
        action="store_true",
        help="pin the server to the first core and this load generator to the others (Linux)",
    )
    args = parser.parse_args()
    server_cpus = None
    if args.split_cores:
        cores = sorted(os.sched_getaffinity(0))
        if len(cores) < 2:
            raise SystemExit("--split-cores needs at least two cores")
        server_cpus = {cores[0]}
        os.sched_setaffinity(0, set(cores[1:]))
    print(
        "| database | technicians | seconds | save p50 / p95 / p99 (ms) | tile p50 / p95 / p99 (ms) |"
        " saves acknowledged | errors | lost writes |"
    )
    print("|---|---|---|---|---|---|---|---|")
    with tempfile.TemporaryDirectory(prefix="bench-load-") as folder:
        sqlite = Settings(
            environment="test",
            data_dir=Path(folder) / "sqlite",
            database_url=f"sqlite:///{Path(folder) / 'load.sqlite3'}",
        )
        load = Load(users=args.users, seconds=args.seconds, warmup=args.warmup, think=args.think)
        run("SQLite, 1 web worker", sqlite, load, workers=1, server_cpus=server_cpus)
        if args.postgres:
            schema_url = fresh_schema(args.postgres)
            postgres = Settings(environment="test", data_dir=Path(folder) / "pg", database_url=schema_url)
            run("PostgreSQL, 2 web workers", postgres, load, workers=2, server_cpus=server_cpus)


def fresh_schema(base: str) -> str:
    """A new, empty schema in the given PostgreSQL database, so the bench never touches existing data."""
    import secrets

    from sqlalchemy import create_engine, text

    schema = f"bench_{secrets.token_hex(4)}"
    engine = create_engine(base, isolation_level="AUTOCOMMIT")
    with engine.connect() as connection:
        connection.execute(text(f"CREATE SCHEMA {schema}"))
    engine.dispose()
    separator = "&" if "?" in base else "?"
    return f"{base}{separator}options=-csearch_path%3D{schema}"


if __name__ == "__main__":
    main()
