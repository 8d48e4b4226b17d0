"""`tracedesk demo` and `tracedesk demo --remove` as an operator runs them (one demo sheet, drawn small)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from click.testing import CliRunner
from sqlalchemy.orm import Session

from tracedesk.audit.service import verify_chain
from tracedesk.cli import main
from tracedesk.db import build_engine
from tracedesk.demo import loader
from tracedesk.demo.scenarios import demo_sheets
from tracedesk.migrate import upgrade_database


@pytest.fixture
def env(tmp_path: Path, database_url: str, monkeypatch: pytest.MonkeyPatch) -> Path:
    data = tmp_path / "data"
    monkeypatch.setenv("TRACEDESK_DATA_DIR", str(data))
    monkeypatch.setenv("TRACEDESK_DATABASE_URL", database_url)
    monkeypatch.setenv("TRACEDESK_ENVIRONMENT", "test")
    one_sheet = tuple(sheet for sheet in demo_sheets() if sheet.key == "level-w12")
    monkeypatch.setattr(loader, "demo_sheets", lambda: one_sheet)
    engine = build_engine(database_url)  # migrated here, so no command's engine outlives its test
    upgrade_database(engine)
    engine.dispose()
    return data


def test_demo_prints_passwords_once_and_removes_cleanly(env: Path, database_url: str) -> None:
    runner = CliRunner()
    first = runner.invoke(main, ["demo", "--dpi", "40"])
    assert first.exit_code == 0, first.output
    assert "demo archive ready: 3 collection(s), 1 new sheet(s)" in first.output
    for username in ("demo-admin", "demo-tech1", "demo-tech2", "demo-reviewer"):
        assert re.search(rf"{username}\s+\w+\s+\S{{16}}", first.output), username

    second = runner.invoke(main, ["demo", "--dpi", "40"])
    assert second.exit_code == 0 and "0 new sheet(s)" in second.output
    assert "Demo accounts" not in second.output  # passwords are printed once only

    removed = runner.invoke(main, ["demo", "--remove"])
    assert removed.exit_code == 0, removed.output
    assert "demo archive removed" in removed.output and "1 sheet(s)" in removed.output
    assert "demo accounts disabled: demo-admin, demo-reviewer, demo-tech1, demo-tech2" in removed.output
    assert "there is no demo archive to remove" in runner.invoke(main, ["demo", "--remove"]).output
    engine = build_engine(database_url)
    try:
        with engine.connect() as connection, Session(bind=connection) as session:
            assert verify_chain(session).ok
    finally:
        engine.dispose()
