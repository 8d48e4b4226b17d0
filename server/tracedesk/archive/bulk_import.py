"""Bulk import of a folder of scans from the command line, with a progress bar and a summary."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import click
from sqlalchemy import func, select

from tracedesk.accounts.service import actor_of, get_user_by_name
from tracedesk.archive.ingest import ReceivedFile, ingest_received
from tracedesk.archive.schemas import CollectionCreate
from tracedesk.archive.service import create_collection
from tracedesk.audit.service import SYSTEM, Actor
from tracedesk.db import transaction
from tracedesk.errors import AppError, Conflict
from tracedesk.imaging.errors import UploadRefused
from tracedesk.models import Collection
from tracedesk.storage import StorageError, sha256_of_file
from tracedesk.web.state import AppState

SCAN_SUFFIXES = frozenset({".png", ".jpg", ".jpeg", ".tif", ".tiff", ".pdf"})


@dataclass
class ImportSummary:
    accepted: int = 0
    duplicates: list[tuple[str, str]] = field(default_factory=list)
    refused: list[tuple[str, str]] = field(default_factory=list)


def _collection_id(state: AppState, name: str, actor: Actor) -> int:
    with transaction(state.writer) as session:
        existing = session.scalar(select(Collection).where(func.lower(Collection.name) == name.strip().lower()))
        if existing is not None:
            return existing.id
        return create_collection(session, CollectionCreate(name=name), actor=actor).id


def _actor(state: AppState, username: str | None) -> Actor:
    if username is None:
        return SYSTEM
    with transaction(state.reader) as session:
        return actor_of(get_user_by_name(session, username))


def candidate_files(folder: Path) -> list[Path]:
    """Every file below ``folder`` (sorted); files without a scan suffix are still tried, and refused clearly."""
    return sorted(path for path in folder.rglob("*") if path.is_file() and not path.name.startswith("."))


def _import_one(state: AppState, collection_id: int, actor: Actor, path: Path, summary: ImportSummary) -> None:
    received = ReceivedFile(
        path=path, filename=path.name, media_type=None, sha256=sha256_of_file(path), size=path.stat().st_size
    )
    try:
        summary.accepted += len(ingest_received(state, collection_id, actor, received))
    except Conflict as error:
        summary.duplicates.append((str(path), error.message))
    except UploadRefused as error:
        summary.refused.append((str(path), error.reason))
    except (AppError, StorageError) as error:
        summary.refused.append((str(path), str(error)))


def import_folder(state: AppState, folder: Path, *, collection_name: str, username: str | None) -> ImportSummary:
    """Import every file in ``folder`` into the named collection (created if missing)."""
    actor = _actor(state, username)
    collection_id = _collection_id(state, collection_name, actor)
    summary = ImportSummary()
    files = candidate_files(folder)
    with click.progressbar(files, label="importing scans", item_show_func=lambda p: p.name if p else "") as bar:
        for path in bar:
            _import_one(state, collection_id, actor, path, summary)
    return summary
