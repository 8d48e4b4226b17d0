"""The `tracedesk` command as an operator uses it (click's CliRunner, a temp data folder, both databases)."""

from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner
from sqlalchemy import create_engine, text

from tests.archive.scans import pdf_bytes, png_bytes
from tracedesk.cli import main


@pytest.fixture
def env(tmp_path: Path, database_url: str, monkeypatch: pytest.MonkeyPatch) -> Path:
    data = tmp_path / "data"
    monkeypatch.setenv("TRACEDESK_DATA_DIR", str(data))
    monkeypatch.setenv("TRACEDESK_DATABASE_URL", database_url)
    monkeypatch.setenv("TRACEDESK_ENVIRONMENT", "test")
    result = CliRunner().invoke(main, ["migrate"])
    assert result.exit_code == 0, result.output
    return data


def test_user_add_list_disable_and_token(env: Path) -> None:
    runner = CliRunner()
    added = runner.invoke(
        main,
        ["user", "add", "Mara", "--role", "technician", "--name", "Mara Quill", "--password-stdin"],
        input="a long enough secret\n",
    )
    assert added.exit_code == 0, added.output
    assert "created mara (technician)" in added.output
    generated = runner.invoke(main, ["user", "add", "otto", "--role", "viewer"])
    assert "password:" in generated.output
    listing = runner.invoke(main, ["user", "list"]).output
    assert "mara" in listing and "technician" in listing and "Mara Quill" in listing
    token = runner.invoke(main, ["token", "create", "mara"])
    assert token.exit_code == 0 and token.output.strip().startswith("tdk_")
    assert runner.invoke(main, ["user", "disable", "mara"]).exit_code == 0
    assert "(disabled)" in runner.invoke(main, ["user", "list"]).output
    weak = runner.invoke(main, ["user", "add", "pat", "--role", "viewer", "--password-stdin"], input="password\n")
    assert weak.exit_code == 2 and "refused" in weak.output
    bad_role = runner.invoke(main, ["user", "add", "pat", "--role", "boss"])
    assert bad_role.exit_code != 0


def test_import_summarises_accepted_duplicates_and_refused(env: Path, tmp_path: Path) -> None:
    folder = tmp_path / "scans"
    folder.mkdir()
    (folder / "a.png").write_bytes(png_bytes(seed=1))
    (folder / "b.pdf").write_bytes(pdf_bytes(2))
    (folder / "copy-of-a.png").write_bytes(png_bytes(seed=1))
    (folder / "readme.txt").write_text("not a scan")
    result = CliRunner().invoke(main, ["import", str(folder), "--collection", "Gauge box 3"])
    assert result.exit_code == 3, result.output  # refused files make the exit code non-zero
    assert "accepted 3 sheet(s), duplicates 1, refused 1" in result.output
    assert "readme.txt" in result.output and "already in the collection as sheet #" in result.output


def test_audit_verify_names_the_broken_sequence_number(env: Path, database_url: str) -> None:
    runner = CliRunner()
    for name in ("ann", "ben", "cal"):
        runner.invoke(main, ["user", "add", name, "--role", "viewer"])
    ok = runner.invoke(main, ["audit", "verify"])
    assert ok.exit_code == 0 and "3 events verified" in ok.output
    engine = create_engine(database_url)
    with engine.begin() as connection:  # an attacker with database access drops the guard, then edits event 2
        if engine.dialect.name == "sqlite":
            connection.execute(text("DROP TRIGGER audit_events_no_update"))
        else:
            connection.execute(text("DROP TRIGGER audit_events_no_update_delete ON audit_events"))
        connection.execute(text("UPDATE audit_events SET action = 'delete' WHERE seq = 2"))
    engine.dispose()
    broken = runner.invoke(main, ["audit", "verify"])
    assert broken.exit_code == 1
    assert "sequence number 2" in broken.output


def test_production_refuses_the_default_secret(env: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("TRACEDESK_ENVIRONMENT", "production")
    result = CliRunner().invoke(main, ["user", "list"])
    assert result.exit_code != 0
    assert "TRACEDESK_SECRET_KEY" in str(result.exception)
