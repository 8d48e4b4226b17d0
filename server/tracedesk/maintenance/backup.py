"""`tracedesk backup DEST` and `tracedesk restore SRC`: database, files and audit chain, checked on the way back.

A backup is a folder:

- ``manifest.json``: format, time, software version, database kind, schema revision, and the inventory (row
  counts per table, original keys and sizes, derived folder names, audit chain head);
- ``database.sqlite3`` (SQLite online backup API) or ``database.dump`` (``pg_dump --format=custom``);
- ``files/originals/<sha256>`` and ``files/derived/<name>/<relative path>``, copied through the store's verified
  reads (so a corrupt stored file fails the backup instead of being copied silently).

Restore needs an empty target database of the same kind and an empty store; it then checks row counts, file
hashes and the audit chain against the manifest and fails loudly on any difference.
"""

from __future__ import annotations

import json
import shutil
import sqlite3
import subprocess
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from sqlalchemy import Engine, inspect
from sqlalchemy.engine import make_url

from tracedesk import __version__
from tracedesk.db import transaction
from tracedesk.maintenance.inventory import take_inventory
from tracedesk.migrate import current_revision
from tracedesk.storage import FileStore, sha256_of_file
from tracedesk.web.state import AppState

FORMAT = "tracedesk-backup/1"
MANIFEST = "manifest.json"
Progress = Callable[[str], None]


class BackupError(Exception):
    """A backup or restore that cannot be done or does not check out; the message says what differs."""


def libpq_url(engine: Engine) -> str:
    """The SQLAlchemy URL as a libpq connection string for pg_dump / pg_restore (driver name removed)."""
    url = make_url(engine.url.render_as_string(hide_password=False)).set(drivername="postgresql")
    return url.render_as_string(hide_password=False)


def _dump_database(engine: Engine, folder: Path) -> str:
    if engine.dialect.name == "sqlite":
        source_path = engine.url.database
        assert source_path
        with sqlite3.connect(source_path) as source, sqlite3.connect(folder / "database.sqlite3") as target:
            source.backup(target)
        return "database.sqlite3"
    target_file = folder / "database.dump"
    command = [
        "pg_dump",
        "--format=custom",
        "--no-owner",
        "--no-privileges",
        f"--file={target_file}",
        f"--dbname={libpq_url(engine)}",
    ]
    completed = subprocess.run(command, capture_output=True, text=True, check=False)  # noqa: S603
    if completed.returncode != 0:
        raise BackupError(f"pg_dump failed: {completed.stderr.strip()}")
    return "database.dump"


def _copy_files(store: FileStore, originals: dict[str, int], derived: list[str], folder: Path) -> None:
    (folder / "files" / "originals").mkdir(parents=True)
    for key in originals:
        store.copy_verified(key, folder / "files" / "originals" / key)
    for name in derived:
        for relative in store.derived_manifest(name):
            destination = folder / "files" / "derived" / name / relative
            destination.parent.mkdir(parents=True, exist_ok=True)
            store.copy_derived(name, relative, destination)


def backup_archive(state: AppState, destination: Path, *, progress: Progress | None = None) -> dict[str, Any]:
    """Write a backup folder (it must not exist yet); returns the manifest."""
    say = progress or (lambda _message: None)
    if destination.exists():
        raise BackupError(f"{destination} exists already; choose a new folder for the backup")
    partial = destination.with_name(destination.name + ".partial")
    shutil.rmtree(partial, ignore_errors=True)
    partial.mkdir(parents=True)
    with transaction(state.reader) as session:
        inventory = take_inventory(session, state.store)
    if not inventory.chain_ok:
        raise BackupError("the audit chain does not verify; run `tracedesk audit verify` before backing up")
    say("copying the database")
    database_file = _dump_database(state.engine, partial)
    say(f"copying {len(inventory.originals)} original(s) and {len(inventory.derived)} derived folder(s)")
    _copy_files(state.store, inventory.originals, inventory.derived, partial)
    manifest = {
        "format": FORMAT,
        "created_at": datetime.now(UTC).isoformat(timespec="seconds"),
        "software_version": __version__,
        "database": {
            "kind": state.engine.dialect.name,
            "file": database_file,
            "revision": current_revision(state.engine),
        },
        "inventory": inventory.to_dict(),
    }
    (partial / MANIFEST).write_text(json.dumps(manifest, indent=2), encoding="utf-8")
    partial.rename(destination)  # a backup folder without ".partial" is always complete
    return manifest


def _require_empty(state: AppState) -> None:
    tables = set(inspect(state.engine).get_table_names()) - {"alembic_version"}
    if tables:
        raise BackupError("the target database is not empty; restore needs a new, empty database")
    if any(True for _ in state.store.iter_keys()):
        raise BackupError("the target file store is not empty; restore needs a new, empty data folder")


def _restore_database(state: AppState, source: Path, manifest: dict[str, Any]) -> None:
    kind = manifest["database"]["kind"]
    if kind != state.engine.dialect.name:
        raise BackupError(f"this backup holds a {kind} database; use `tracedesk move-to-postgres` to change engines")
    state.engine.dispose()
    if kind == "sqlite":
        target = state.engine.url.database
        assert target
        with sqlite3.connect(source / "database.sqlite3") as backup, sqlite3.connect(target) as live:
            backup.backup(live)
        return
    command = [
        "pg_restore",
        "--no-owner",
        "--no-privileges",
        "--exit-on-error",
        "--single-transaction",
        f"--dbname={libpq_url(state.engine)}",
        str(source / "database.dump"),
    ]
    completed = subprocess.run(command, capture_output=True, text=True, check=False)  # noqa: S603
    if completed.returncode != 0:
        raise BackupError(f"pg_restore failed: {completed.stderr.strip()}")


def _restore_files(store: FileStore, source: Path, manifest: dict[str, Any]) -> None:
    originals: dict[str, int] = manifest["inventory"]["originals"]
    for key in originals:
        path = source / "files" / "originals" / key
        if sha256_of_file(path) != key:
            raise BackupError(f"the backup's copy of original {key} is damaged")
        store.put_file(path, expected_sha256=key)
    for name in manifest["inventory"]["derived"]:
        folder = source / "files" / "derived" / name
        with store.stage_derived(name) as staging:
            shutil.copytree(folder, staging.path, dirs_exist_ok=True)


def _compare(expected: dict[str, Any], actual: dict[str, Any]) -> None:
    for part in ("row_counts", "originals", "derived"):
        if expected[part] != actual[part]:
            raise BackupError(f"restored {part.replace('_', ' ')} differ from the backup's manifest")
    if expected["audit"]["last_hash"] != actual["audit"]["last_hash"] or not actual["audit"]["chain_ok"]:
        raise BackupError("the restored audit chain does not match the backup or does not verify")


def restore_archive(state: AppState, source: Path, *, progress: Progress | None = None) -> dict[str, Any]:
    """Restore a backup folder into this (empty) database and store; returns the checked inventory."""
    say = progress or (lambda _message: None)
    manifest = json.loads((source / MANIFEST).read_text(encoding="utf-8"))
    if manifest.get("format") != FORMAT:
        raise BackupError(f"{source} is not a Tracedesk backup (format {manifest.get('format')!r})")
    _require_empty(state)
    say("restoring the database")
    _restore_database(state, source, manifest)
    say("restoring files")
    _restore_files(state.store, source, manifest)
    with transaction(state.reader) as session:
        actual = take_inventory(session, state.store).to_dict()
    _compare(manifest["inventory"], actual)
    return actual
