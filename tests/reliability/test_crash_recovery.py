"""The server killed with SIGKILL in the middle of writes, many times over, loses nothing it acknowledged.

A real uvicorn server on a loopback port, on a temp data folder and a fresh database (a SQLite file, or a new
PostgreSQL database), takes creates, edits and uploads from several threads; after a random moment it is killed
with SIGKILL (no shutdown, no flush), then the test checks the database as a crashed installation would be
found: the database's own integrity check passes (SQLite's ``PRAGMA integrity_check``; on PostgreSQL amcheck's
``verify_heapam`` on every table and ``bt_index_check`` with ``heapallindexed`` on every B-tree index), every
write whose answer reached the client is there, the audit chain verifies, every file a row references is in the
store. After the last round `tracedesk sweep --grace-hours 0` removes the files that died with their uploads
(the way SQLite tests crash recovery; RELIABILITY.md, "Concurrency and durability"). On PostgreSQL the killed
server's connections die with it and the database server rolls their transactions back, as after a crash of
the application host. Nothing reaches beyond 127.0.0.1.
"""

from __future__ import annotations

import os
import random
import signal
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import httpx
import pytest
from click.testing import CliRunner
from sqlalchemy import Connection, select, text
from sqlalchemy.exc import DBAPIError

from tests.archive.scans import png_bytes
from tests.conftest import database_kinds
from tests.reliability.campaign import (
    build_campaign,
    fresh_database,
    missing_files,
    new_collection,
    referenced_files,
    stored_files,
)
from tests.reliability.conftest import Figures
from tests.reliability.live_server import Launcher, free_port, server_environment, wait_until_ready
from tracedesk.app import build_state
from tracedesk.audit.service import verify_chain
from tracedesk.cli import main as cli_main
from tracedesk.db import transaction
from tracedesk.models import AuditEvent, Collection, Sheet
from tracedesk.web.state import AppState

ROUNDS = 20
MIN_ROUNDS = 8
TIME_BUDGET_S = 45.0  # per database: after MIN_ROUNDS, stop starting new rounds once this is spent
KILL_AFTER_S = (0.3, 1.5)
WRITERS = 3


@dataclass
class Ledger:
    """What the server acknowledged: 2xx answers that reached the client."""

    box: int
    collections: dict[str, int] = field(default_factory=dict)
    sheets: set[int] = field(default_factory=set)
    edits: list[tuple[int, str]] = field(default_factory=list)  # (version, description) of the edited box
    lock: threading.Lock = field(default_factory=threading.Lock)


def _creator(client: httpx.Client, ledger: Ledger, tag: str, stop: threading.Event) -> None:
    for number in range(10_000):
        if stop.is_set():
            return
        name = f"{tag}-{number}"
        response = client.post("/api/v1/collections", json={"name": name})
        if response.status_code == 201:
            with ledger.lock:
                ledger.collections[name] = int(response.json()["id"])


def _uploader(client: httpx.Client, ledger: Ledger, box: int, seed: int, stop: threading.Event) -> None:
    for number in range(10_000):
        if stop.is_set():
            return
        files = [("files", (f"scan-{seed}-{number}.png", png_bytes(seed=seed * 1000 + number), "image/png"))]
        response = client.post(f"/api/v1/collections/{box}/sheets", files=files)
        if response.status_code == 201:
            with ledger.lock:
                ledger.sheets.update(sheet["id"] for sheet in response.json()["sheets"])


def _editor(client: httpx.Client, ledger: Ledger, box: int, tag: str, stop: threading.Event) -> None:
    etag = client.get(f"/api/v1/collections/{box}").headers["etag"]
    for number in range(10_000):
        if stop.is_set():
            return
        description = f"{tag}-{number}"
        response = client.patch(
            f"/api/v1/collections/{box}", json={"description": description}, headers={"If-Match": etag}
        )
        if response.status_code == 200:
            etag = response.headers["etag"]
            with ledger.lock:
                ledger.edits.append((int(response.json()["version"]), description))


def _run_quietly(work: Callable[[], None]) -> None:
    try:
        work()
    except (httpx.TransportError, KeyError):
        return  # the server died under this request: its answer never came, so nothing was acknowledged


def _one_round(launcher: Launcher, token: str, ledger: Ledger, box: int, round_number: int, rng: random.Random) -> None:
    port = free_port()
    pid = launcher.start(port)
    base = f"http://127.0.0.1:{port}"
    wait_until_ready(base)
    stop = threading.Event()
    clients = [
        httpx.Client(base_url=base, headers={"Authorization": f"Bearer {token}"}, timeout=20.0)
        for _ in range(WRITERS + 2)
    ]
    work = [lambda c=clients[i], i=i: _creator(c, ledger, f"r{round_number}-w{i}", stop) for i in range(WRITERS)]
    work.append(lambda: _uploader(clients[-2], ledger, box, round_number + 1, stop))
    work.append(lambda: _editor(clients[-1], ledger, box, f"r{round_number}", stop))
    threads = [threading.Thread(target=_run_quietly, args=(item,)) for item in work]
    for thread in threads:
        thread.start()
    time.sleep(rng.uniform(*KILL_AFTER_S))
    os.kill(pid, signal.SIGKILL)
    stop.set()
    for thread in threads:
        thread.join(timeout=30)
    for client in clients:
        client.close()
    launcher.reap(pid)


def _postgres_integrity_problems(connection: Connection) -> list[str]:
    """amcheck on every table (heap pages) and every B-tree index (with all heap tuples found in it)."""
    connection.execute(text("CREATE EXTENSION IF NOT EXISTS amcheck"))
    relations = connection.execute(
        text(
            "SELECT c.oid::regclass::text, c.relkind, a.amname FROM pg_class c "
            "JOIN pg_namespace n ON n.oid = c.relnamespace LEFT JOIN pg_am a ON a.oid = c.relam "
            "WHERE n.nspname = current_schema() AND c.relkind IN ('r', 'i')"
        )
    ).all()
    problems = [] if relations else ["no table or index found to check"]
    for name, kind, method in relations:
        try:
            if kind == "r":
                found = connection.execute(text("SELECT msg FROM verify_heapam(:name)"), {"name": name}).all()
                problems += [f"{name}: {row.msg}" for row in found]
            elif method == "btree":
                connection.execute(text("SELECT bt_index_check(CAST(:name AS regclass), true)"), {"name": name})
        except DBAPIError as error:
            problems.append(f"{name}: {error.orig}")
    return problems


def _integrity_problems(state: AppState) -> list[str]:
    """The database's own check of its files and indexes, as a crashed installation would be checked."""
    with state.engine.connect() as connection:
        if connection.dialect.name == "postgresql":
            problems = _postgres_integrity_problems(connection)
            connection.commit()
            return [f"integrity check: {problem}" for problem in problems]
        verdict = connection.execute(text("PRAGMA integrity_check")).scalar()
    return [] if verdict == "ok" else [f"integrity check: {verdict}"]


def _check(state: AppState, ledger: Ledger) -> tuple[int, list[str], int]:
    """(acknowledged writes checked, problems, writes or files lost) on the database as the crash left it."""
    problems = _integrity_problems(state)
    with transaction(state.reader) as session:
        if not verify_chain(session).ok:
            problems.append("the audit chain does not verify")
        names = set(session.scalars(select(Collection.name)))
        sheets = set(session.scalars(select(Sheet.id)))
        box_version, box_description = session.execute(
            select(Collection.version, Collection.description).where(Collection.id == ledger.box)
        ).one()
        audited = {
            int(i)
            for i in session.scalars(
                select(AuditEvent.entity_id).where(
                    AuditEvent.entity_type == "collection", AuditEvent.action == "create"
                )
            )
        }
    lost = [name for name in ledger.collections if name not in names]
    lost += [f"sheet {sheet}" for sheet in ledger.sheets - sheets]
    lost += [f"no create event for {name}" for name, cid in ledger.collections.items() if cid not in audited]
    if ledger.edits:
        version, description = max(ledger.edits)
        if box_version < version or (box_version == version and box_description != description):
            lost.append(f"acknowledged edit v{version} overwritten by v{box_version}")
    lost += missing_files(state)
    problems += [f"lost: {item}" for item in lost]
    checked = len(ledger.collections) + len(ledger.sheets) + len(ledger.edits)
    return checked, problems, len(lost)


@pytest.mark.parametrize("kind", database_kinds())
def test_sigkill_during_writes_loses_no_acknowledged_write(
    kind: str, tmp_path: Path, figures: Figures, monkeypatch: pytest.MonkeyPatch
) -> None:
    with fresh_database(kind, tmp_path) as url:
        _crash_rounds(url, tmp_path / "data", figures, monkeypatch)


def _crash_rounds(url: str, data_dir: Path, figures: Figures, monkeypatch: pytest.MonkeyPatch) -> None:
    campaign = build_campaign(url, data_dir)
    box = new_collection(campaign.client("technician"), "Crash box")
    token = campaign.members["reviewer"].token  # may create, upload and edit collections
    campaign.close()
    env = server_environment(campaign.settings)
    state = build_state(campaign.settings, migrate=False)
    ledger = Ledger(box=box)
    launcher = Launcher(env)
    rng = random.Random(20261202)
    rounds, cases, failures, data_lost, problems = 0, 0, 0, 0, []
    started = time.monotonic()
    try:
        while rounds < ROUNDS and (rounds < MIN_ROUNDS or time.monotonic() - started < TIME_BUDGET_S):
            _one_round(launcher, token, ledger, box, rounds, rng)
            rounds += 1
            checked, found, lost = _check(state, ledger)
            cases, data_lost = checked + rounds, max(data_lost, lost)
            failures += int(bool(found))
            problems += [f"round {rounds}: {problem}" for problem in found]
    finally:
        launcher.close()
    strays = _strays(state)
    for name, value in env.items():
        if name.startswith("TRACEDESK_"):
            monkeypatch.setenv(name, value)
    swept = CliRunner().invoke(cli_main, ["sweep", "--grace-hours", "0"])
    left = _strays(state)
    lost_after_sweep = missing_files(state)
    failures += int(swept.exit_code != 0) + int(bool(left)) + int(bool(lost_after_sweep))
    failures += int(not (ledger.sheets and ledger.edits))
    figures.add(cases=cases + 1, failures=failures, data_lost=data_lost + len(lost_after_sweep))
    state.engine.dispose()
    assert rounds >= MIN_ROUNDS
    assert ledger.sheets and ledger.edits, "no upload or no edit was acknowledged: the rounds are too short"
    assert not problems, "\n".join(problems[:20])
    assert swept.exit_code == 0, swept.output
    assert not left, f"the sweep left stray files: {sorted(left)[:5]} (before it: {len(strays)})"
    assert not lost_after_sweep


def _strays(state: AppState) -> set[str]:
    """Files in the data folder no row accounts for: unreferenced originals and derived folders, temp files."""
    keys, derived = referenced_files(state)
    strays = set()
    for path in stored_files(state):
        parts = Path(path).parts
        if parts[:2] == ("files", "originals") and parts[-1] in keys:
            continue
        if parts[:2] == ("files", "derived") and parts[2] in derived:
            continue
        strays.add(path)
    return strays
