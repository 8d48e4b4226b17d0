"""Sheet list with 100,000 sheets in the archive: time per page (keyset pagination), SQLite and PostgreSQL.

Run: .venv/bin/python -m bench.bench_sheet_list [--sheets 100000] [--postgres URL]

Inserts the rows directly (one collection, one source file, 100,000 sheets), then asks the JSON API for pages of 50
through the in-process ASGI client: walking forward with cursors, jumping to cursors deep in the archive, and with
a text filter. Reports p50 / p95 per page (target p95 <= 50 ms) and, as the reference in the same run, the time
of the bare SQL query for the same page.
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

import numpy as np
from fastapi.testclient import TestClient
from sqlalchemy import insert, select, text

from bench.bench_load import fresh_schema
from tracedesk.accounts.service import create_api_token, create_user
from tracedesk.app import build_state, create_app
from tracedesk.archive.service import encode_cursor
from tracedesk.audit.service import SYSTEM
from tracedesk.config import Settings
from tracedesk.db import transaction
from tracedesk.migrate import upgrade_database
from tracedesk.models import Collection, Sheet, SourceFile

PAGE = 50


def fill(settings: Settings, count: int) -> str:
    state = build_state(settings, migrate=False)
    upgrade_database(state.engine)
    with transaction(state.writer) as session:
        user = create_user(
            session, state.hasher, actor=SYSTEM, username="bench", password="bench password 1", role="viewer"
        )
        token = create_api_token(session, user, name="bench", actor=SYSTEM)[0]
        session.add(Collection(id=1, name="Big box"))
        session.add(SourceFile(id=1, sha256="0" * 64, size_bytes=1, media_type="image/png", page_count=count))
    rows = [
        {
            "collection_id": 1,
            "source_file_id": 1,
            "page_index": i,
            "filename": f"scan-{i:06d}.png",
            "width": 7000,
            "height": 5000,
            "derived_key": f"sheet-{i:06d}",
            "station": f"gauge {i % 97}",
            "tags": "[]",
            "status": "ready",
            "version": 1,
        }
        for i in range(count)
    ]
    with state.engine.begin() as connection:
        for start in range(0, count, 5000):
            connection.execute(insert(Sheet), rows[start : start + 5000])
        if state.engine.dialect.name == "postgresql":
            connection.execute(text("ANALYZE"))
    state.engine.dispose()
    return token


def timed(call, repeats: int) -> list[float]:  # type: ignore[no-untyped-def]
    samples = []
    for index in range(repeats):
        started = time.perf_counter()
        call(index)
        samples.append((time.perf_counter() - started) * 1000)
    return samples


def run(label: str, settings: Settings, count: int) -> None:
    token = fill(settings, count)
    state = build_state(settings, migrate=False)
    app = create_app(settings, state=state)
    rng = np.random.default_rng(0)
    cursors = [encode_cursor(int(i)) for i in rng.integers(1, count, 200)]
    with TestClient(app) as client:
        client.headers["Authorization"] = f"Bearer {token}"
        walk_cursor: dict[str, str | None] = {"next": None}

        def walk(_: int) -> None:
            params = {"collection_id": 1, "limit": PAGE}
            if walk_cursor["next"]:
                params["cursor"] = walk_cursor["next"]  # type: ignore[assignment]
            walk_cursor["next"] = client.get("/api/v1/sheets", params=params).json()["next_cursor"]

        results = {
            "walk forward": timed(walk, 200),
            "jump deep": timed(
                lambda i: client.get(
                    "/api/v1/sheets", params={"collection_id": 1, "limit": PAGE, "cursor": cursors[i]}
                ),
                200,
            ),
            "text filter": timed(
                lambda i: client.get(
                    "/api/v1/sheets", params={"collection_id": 1, "limit": PAGE, "q": f"gauge {i % 97}"}
                ),
                100,
            ),
        }
    with state.engine.connect() as connection:
        query = select(Sheet).where(Sheet.collection_id == 1, Sheet.id > 50_000).order_by(Sheet.id).limit(PAGE + 1)
        bare = timed(lambda _: connection.execute(query).all(), 200)
    state.engine.dispose()
    for name, samples in results.items():
        print(
            f"| {label} | {name} | {np.percentile(samples, 50):.1f} | {np.percentile(samples, 95):.1f} |"
            f" {np.percentile(bare, 50):.2f} |"
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sheets", type=int, default=100_000)
    parser.add_argument("--postgres", default=os.environ.get("TRACEDESK_TEST_POSTGRES_URL"))
    args = parser.parse_args()
    print("| database | page request | p50 ms | p95 ms | bare SQL p50 ms (reference) |")
    print("|---|---|---|---|---|")
    with tempfile.TemporaryDirectory() as folder:
        run(
            "SQLite",
            Settings(
                environment="test",
                data_dir=Path(folder) / "a",
                database_url=f"sqlite:///{Path(folder) / 'list.sqlite3'}",
            ),
            args.sheets,
        )
        if args.postgres:
            run(
                "PostgreSQL",
                Settings(environment="test", data_dir=Path(folder) / "b", database_url=fresh_schema(args.postgres)),
                args.sheets,
            )


if __name__ == "__main__":
    main()
