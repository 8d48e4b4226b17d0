"""Removing the demo archive: its collections and everything in them (sheets, calibrations, traces, fits, tasks,
comments, signatures and their files), and the demo accounts are disabled.

Every removed record gets a "delete" event in the audit trail, in the same transaction as the removal; the audit
trail itself is append-only and keeps every event about the demo. Files go after the commit (a crash in between
leaves unreferenced files, which the orphan sweep removes).
"""

from __future__ import annotations

import contextlib
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy import delete, func, select
from sqlalchemy.orm import Session

from tracedesk.audit.service import SYSTEM, Actor, record_event
from tracedesk.db import transaction
from tracedesk.demo.archive_events import record_demo_event
from tracedesk.demo.people import disable_demo_people
from tracedesk.models import (
    BatchRun,
    BatchRunItem,
    Calibration,
    ChartSpec,
    Collection,
    CollectionWorkflow,
    Fit,
    Notice,
    ReviewComment,
    Sheet,
    Signature,
    SourceFile,
    Task,
    Trace,
)
from tracedesk.storage import FileStore, StorageError
from tracedesk.web.state import AppState

REASON = "demo archive removed"


@dataclass
class RemovalSummary:
    """What was removed, by kind of record, and the demo accounts disabled."""

    removed: dict[str, int] = field(default_factory=dict)
    files_removed: int = 0
    accounts_disabled: list[str] = field(default_factory=list)

    @property
    def anything(self) -> bool:
        return any(self.removed.values()) or bool(self.accounts_disabled)


def _audit_deletions(session: Session, kind: str, rows: Sequence[Any], summary: RemovalSummary, actor: Actor) -> None:
    for row in rows:
        record_event(
            session,
            actor=actor,
            action="delete",
            entity_type=kind,
            entity_id=getattr(row, "sheet_id", row.id) if kind == "calibration" else row.id,
            entity_version=getattr(row, "version", None),
            changes={},
            reason=REASON,
        )
    summary.removed[kind] = summary.removed.get(kind, 0) + len(rows)


def _remove(
    session: Session, model: Any, kind: str | None, condition: Any, summary: RemovalSummary, actor: Actor
) -> list[Any]:
    """Delete the rows matching ``condition``, auditing each one under ``kind`` (None: not audited records)."""
    rows = list(session.scalars(select(model).where(condition).order_by(model.id)))
    if kind is not None:
        _audit_deletions(session, kind, rows, summary, actor)
    if rows:
        session.execute(delete(model).where(model.id.in_([row.id for row in rows])))
    return rows


def _remove_workflow(session: Session, sheet_ids: list[int], summary: RemovalSummary, actor: Actor) -> None:
    task_ids = list(session.scalars(select(Task.id).where(Task.sheet_id.in_(sheet_ids))))
    _remove(session, ReviewComment, "review_comment", ReviewComment.sheet_id.in_(sheet_ids), summary, actor)
    _remove(session, Signature, "signature", Signature.sheet_id.in_(sheet_ids), summary, actor)
    _remove(session, Notice, None, Notice.task_id.in_(task_ids), summary, actor)  # personal notices, not records
    _remove(session, Task, "task", Task.id.in_(task_ids), summary, actor)


def _remove_digitizing(session: Session, sheet_ids: list[int], summary: RemovalSummary, actor: Actor) -> None:
    trace_ids = list(session.scalars(select(Trace.id).where(Trace.sheet_id.in_(sheet_ids))))
    _remove(session, Fit, "fit", Fit.trace_id.in_(trace_ids), summary, actor)
    _remove(session, Trace, "trace", Trace.id.in_(trace_ids), summary, actor)
    _remove(session, Calibration, "calibration", Calibration.sheet_id.in_(sheet_ids), summary, actor)


def _remove_batch_runs(session: Session, collection_ids: list[int], summary: RemovalSummary, actor: Actor) -> None:
    run_ids = list(session.scalars(select(BatchRun.id).where(BatchRun.collection_id.in_(collection_ids))))
    _remove(session, BatchRunItem, None, BatchRunItem.run_id.in_(run_ids), summary, actor)  # verdicts of a run
    _remove(session, BatchRun, "batch_run", BatchRun.id.in_(run_ids), summary, actor)


def _remove_sources(session: Session, source_ids: set[int], summary: RemovalSummary, actor: Actor) -> list[str]:
    """Originals no remaining sheet uses (a real upload of the same bytes keeps its original)."""
    still_used = set(session.scalars(select(Sheet.source_file_id).where(Sheet.source_file_id.in_(source_ids))))
    unused = source_ids - still_used
    rows = _remove(session, SourceFile, "source_file", SourceFile.id.in_(unused), summary, actor)
    return [row.sha256 for row in rows]


def _remove_rows(session: Session, summary: RemovalSummary, actor: Actor) -> tuple[list[str], list[str]]:
    """Every demo row; returns the derived folders and originals to delete once committed."""
    collection_ids = list(session.scalars(select(Collection.id).where(Collection.is_demo.is_(True))))
    sheets = list(session.scalars(select(Sheet).where(Sheet.collection_id.in_(collection_ids))))
    sheet_ids = [sheet.id for sheet in sheets]
    derived = [sheet.derived_key for sheet in sheets]
    source_ids = {sheet.source_file_id for sheet in sheets}
    _remove_workflow(session, sheet_ids, summary, actor)
    _remove_batch_runs(session, collection_ids, summary, actor)
    _remove_digitizing(session, sheet_ids, summary, actor)
    _remove(session, Sheet, "sheet", Sheet.id.in_(sheet_ids), summary, actor)
    originals = _remove_sources(session, source_ids, summary, actor)
    session.execute(delete(CollectionWorkflow).where(CollectionWorkflow.collection_id.in_(collection_ids)))
    _remove(session, ChartSpec, "chart_spec", ChartSpec.collection_id.in_(collection_ids), summary, actor)
    _remove(session, Collection, "collection", Collection.id.in_(collection_ids), summary, actor)
    return derived, originals


def _delete_files(store: FileStore, derived: list[str], originals: list[str]) -> int:
    removed = 0
    for name in derived:
        with contextlib.suppress(StorageError, OSError):
            removed += int(store.delete_derived(name))
    for key in originals:
        with contextlib.suppress(StorageError, OSError):
            removed += int(store.delete(key))
    return removed


def remove_demo(state: AppState, *, actor: Actor = SYSTEM) -> RemovalSummary:
    """Remove every demo collection and what it holds, disable the demo accounts, and say so in the audit trail."""
    summary = RemovalSummary()
    with transaction(state.writer) as session:
        derived, originals = _remove_rows(session, summary, actor)
        summary.accounts_disabled = disable_demo_people(session, actor=actor)
        if summary.anything:
            changes = {"removed": dict(summary.removed)}
            record_demo_event(session, actor=actor, action="remove", changes=changes, reason=REASON)
    summary.files_removed = _delete_files(state.store, derived, originals)
    return summary


def demo_present(session: Session) -> bool:
    """Whether any demo collection exists."""
    return bool(session.scalar(select(func.count()).select_from(Collection).where(Collection.is_demo.is_(True))))
