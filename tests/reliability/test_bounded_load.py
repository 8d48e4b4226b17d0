"""Bounded load on loopback: technicians saving their traces at the same time get no error and lose nothing.

RELIABILITY.md, "Tests to automate": concurrent technicians saving edits on loopback, count- and time-limited,
with the error rate and audit rows equal to successful changes. A real server (live_server.py) on 127.0.0.1, on
a fresh database of each kind; TECHNICIANS threads, one account and one trace each, save their trace SAVES times
back to back (PATCH with If-Match, the workbench's autosave) and read it back after every save. Checked by
counting: every save answered 200 and every read shows the version its save acknowledged; each trace's version
rose by its acknowledged saves; the audit trail holds exactly one update event per acknowledged save; the chain
verifies. How fast it went is bench/bench_load.py's business (figures in the README); nothing here is timed
except a generous safety stop.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

import httpx
import pytest
from sqlalchemy import func, select

from tests.archive.scans import png_bytes
from tests.conftest import PASSWORD, database_kinds
from tests.reliability.campaign import Campaign, Member, build_campaign, chain_verifies, fresh_database_url, upload
from tests.reliability.conftest import Figures
from tests.reliability.live_server import Launcher, running_server, server_environment
from tests.reliability.records import CALIBRATION, VERTICES
from tracedesk.accounts.service import create_api_token, create_user
from tracedesk.audit.service import SYSTEM
from tracedesk.db import transaction
from tracedesk.models import AuditEvent

TECHNICIANS = 8
SAVES = 15
STOP_AFTER_S = 300.0  # a safety stop for a stuck server, far above the few seconds the run takes


@dataclass
class Tally:
    """One technician's run: saves acknowledged, problems seen, and the trace's version before and after."""

    trace_id: int
    first_version: int = 0
    acknowledged: int = 0
    reads: int = 0
    problems: list[str] = field(default_factory=list)


def _add_technicians(campaign: Campaign) -> list[str]:
    names = [f"load-technician-{index}" for index in range(TECHNICIANS)]
    with transaction(campaign.state.writer) as session:
        for name in names:
            user = create_user(
                session, campaign.state.hasher, actor=SYSTEM, username=name, password=PASSWORD, role="technician"
            )
            token, _ = create_api_token(session, user, name="load", actor=SYSTEM)
            campaign.members[name] = Member("technician", name, user.id, token)
    return names


def _seed(campaign: Campaign, names: list[str]) -> list[Tally]:
    """One calibrated sheet and a trace per technician, each made by its technician."""
    first = campaign.client(names[0])
    collection = first.post("/api/v1/collections", json={"name": "Bounded load"}).json()["id"]
    sheet = upload(first, collection, "load.png", png_bytes(seed=808)).json()["sheets"][0]["id"]
    assert first.put(f"/api/v1/sheets/{sheet}/calibration", json=CALIBRATION).status_code == 201
    tallies = []
    for name in names:
        body = {"name": f"pen of {name}", "unit": "m", "vertices": VERTICES}
        created = campaign.client(name).post(f"/api/v1/sheets/{sheet}/traces", json=body)
        assert created.status_code == 201, created.text
        tallies.append(Tally(trace_id=int(created.json()["id"]), first_version=int(created.json()["version"])))
    return tallies


def _save_and_read(client: httpx.Client, tally: Tally, etag: str, number: int) -> str:
    url = f"/api/v1/traces/{tally.trace_id}"
    # Never the line already stored (an unchanged save is no change: no new version, no audit event).
    vertices = [[u, v + 1 + number % 7] for u, v in VERTICES]
    saved = client.patch(url, json={"vertices": vertices}, headers={"If-Match": etag})
    if saved.status_code != 200:
        tally.problems.append(f"save {number}: {saved.status_code} {saved.text[:120]}")
        return etag
    tally.acknowledged += 1
    version = int(saved.json()["version"])
    read = client.get(url)
    tally.reads += 1
    if read.status_code != 200 or int(read.json()["version"]) != version:
        tally.problems.append(f"read after save {number}: {read.status_code}, expected version {version}")
    return str(saved.headers["etag"])


def _technician(base: str, token: str, tally: Tally, deadline: float) -> None:
    with httpx.Client(base_url=base, headers={"Authorization": f"Bearer {token}"}, timeout=60.0) as client:
        try:
            etag = str(client.get(f"/api/v1/traces/{tally.trace_id}").headers["etag"])
            for number in range(SAVES):
                if time.monotonic() > deadline:
                    tally.problems.append(f"stopped by the safety stop after {number} saves")
                    return
                etag = _save_and_read(client, tally, etag, number)
        except httpx.HTTPError as error:
            tally.problems.append(f"transport: {type(error).__name__}: {error}")


def _audited_updates(campaign: Campaign, tallies: list[Tally]) -> dict[int, int]:
    ids = [str(tally.trace_id) for tally in tallies]
    with transaction(campaign.state.reader) as session:
        rows = session.execute(
            select(AuditEvent.entity_id, func.count())
            .where(AuditEvent.entity_type == "trace", AuditEvent.action == "update", AuditEvent.entity_id.in_(ids))
            .group_by(AuditEvent.entity_id)
        ).all()
    return {int(entity_id): int(count) for entity_id, count in rows}


def _final_versions(campaign: Campaign, names: list[str], tallies: list[Tally]) -> dict[int, int]:
    client = campaign.client(names[0])
    return {tally.trace_id: int(client.get(f"/api/v1/traces/{tally.trace_id}").json()["version"]) for tally in tallies}


@pytest.mark.parametrize("kind", database_kinds())
def test_concurrent_technicians_saving_get_no_error_and_every_save_is_audited(
    kind: str, tmp_path: Path, figures: Figures
) -> None:
    with fresh_database_url(kind, tmp_path) as url:
        campaign = build_campaign(url, tmp_path / "data")
        try:
            names = _add_technicians(campaign)
            tallies = _seed(campaign, names)
            launcher = Launcher(server_environment(campaign.settings))
            try:
                with running_server(launcher) as base:
                    deadline = time.monotonic() + STOP_AFTER_S
                    tokens = [campaign.members[name].token for name in names]
                    threads = [
                        threading.Thread(target=_technician, args=(base, token, tally, deadline))
                        for token, tally in zip(tokens, tallies, strict=True)
                    ]
                    for thread in threads:
                        thread.start()
                    for thread in threads:
                        thread.join()
            finally:
                launcher.close()
            audited = _audited_updates(campaign, tallies)
            versions = _final_versions(campaign, names, tallies)
            verifies = chain_verifies(campaign.state)
        finally:
            campaign.close()
    problems = [f"trace {tally.trace_id}: {problem}" for tally in tallies for problem in tally.problems]
    lost = 0
    for tally in tallies:
        expected = tally.first_version + tally.acknowledged
        if versions[tally.trace_id] != expected or audited.get(tally.trace_id, 0) != tally.acknowledged:
            lost += abs(audited.get(tally.trace_id, 0) - tally.acknowledged) or 1
            problems.append(
                f"trace {tally.trace_id}: {tally.acknowledged} saves acknowledged, version "
                f"{tally.first_version} -> {versions[tally.trace_id]}, {audited.get(tally.trace_id, 0)} audited"
            )
    if not verifies:
        problems.append("the audit chain does not verify")
    cases = sum(SAVES + tally.reads for tally in tallies)
    figures.add(cases=cases, failures=len(problems), data_lost=lost)
    assert not problems, "\n".join(problems[:20])
    assert sum(tally.acknowledged for tally in tallies) == TECHNICIANS * SAVES
