"""Every export is itself an audit event ("export"), written in its own short transaction once the file exists,
so downloads served from a read transaction are recorded too (and a failed export records nothing). A background
bundle job writes its event in the transaction that marks the job succeeded (``export_event``)."""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Any

from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor, record_event
from tracedesk.db import transaction
from tracedesk.web.state import AppState


def content_sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def file_sha256(path: Path) -> str:
    """SHA-256 of a file, read in 1 MiB pieces."""
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        for chunk in iter(lambda: handle.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


def export_event(
    session: Session, actor: Actor, *, entity_type: str, entity_id: object, details: dict[str, Any]
) -> None:
    """One audit event in the caller's transaction: what was exported (entity), in which format, its file name,
    size and SHA-256."""
    record_event(
        session,
        actor=actor,
        action="export",
        entity_type=entity_type,
        entity_id=entity_id,
        changes={name: {"old": None, "new": value} for name, value in details.items()},
    )


def record_export(
    state: AppState, actor: Actor, *, entity_type: str, entity_id: object, details: dict[str, Any]
) -> None:
    """``export_event`` in a short write transaction of its own."""
    with transaction(state.writer) as session:
        export_event(session, actor, entity_type=entity_type, entity_id=entity_id, details=details)
