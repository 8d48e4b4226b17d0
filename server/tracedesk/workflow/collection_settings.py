"""A collection's workflow settings (double digitization, agreement tolerance, and the thresholds and fitted model
of its batch runs). Never commits."""

from __future__ import annotations

import json
from typing import Any

from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor, field_changes, record_event
from tracedesk.digitizing.batch_schemas import BatchRunCreate, BatchRunSettings, BatchThresholds
from tracedesk.models import CollectionWorkflow
from tracedesk.models.base import utcnow
from tracedesk.workflow.schemas import WorkflowSettingsRead, WorkflowSettingsUpdate

FIELDS = ("double_digitization", "tolerance")
BATCH_FIELDS = {"batch_thresholds": "thresholds", "batch_fit": "fit"}


def settings_of(session: Session, collection_id: int) -> CollectionWorkflow:
    """The stored settings, or the defaults (version 0, not stored) when none were ever saved."""
    row = session.get(CollectionWorkflow, collection_id)
    if row is None:
        return CollectionWorkflow(collection_id=collection_id, double_digitization=False, tolerance=None, version=0)
    return row


def _stored_batch(row: CollectionWorkflow) -> dict[str, Any]:
    return dict(json.loads(row.batch_settings)) if row.batch_settings else {}


def batch_thresholds_of(row: CollectionWorkflow) -> BatchThresholds:
    """The collection's thresholds for batch runs (the defaults until someone saves them)."""
    return BatchThresholds.model_validate(_stored_batch(row).get("thresholds") or {})


def batch_fit_of(row: CollectionWorkflow) -> dict[str, Any] | None:
    """The model the collection's batch runs fit to each trace (``None``: no fit)."""
    fit = _stored_batch(row).get("fit")
    return dict(fit) if fit else None


def _values(row: CollectionWorkflow) -> dict[str, Any]:
    values = {name: getattr(row, name) for name in FIELDS}
    values["batch_thresholds"] = batch_thresholds_of(row).model_dump()
    values["batch_fit"] = batch_fit_of(row)
    return values


def _set_batch(row: CollectionWorkflow, body: WorkflowSettingsUpdate) -> None:
    stored = _stored_batch(row)
    for name in body.model_fields_set & set(BATCH_FIELDS):
        value = getattr(body, name)
        stored[BATCH_FIELDS[name]] = value.model_dump() if isinstance(value, BatchThresholds) else value
    if body.model_fields_set & set(BATCH_FIELDS):
        row.batch_settings = json.dumps(stored, sort_keys=True)


def run_settings(row: CollectionWorkflow, body: BatchRunCreate) -> BatchRunSettings:
    """The settings a batch run uses: the request's ``fit`` and ``thresholds`` where it sent them, else the
    collection's; ``settings_from`` records which."""
    sent = body.model_fields_set
    settings = BatchRunSettings.model_validate(body.model_dump())
    if "thresholds" not in sent:
        settings.thresholds = batch_thresholds_of(row)
    if "fit" not in sent:
        settings.fit = batch_fit_of(row)
    settings.settings_from = {name: "request" if name in sent else "collection" for name in ("fit", "thresholds")}
    return settings


def update_settings(
    session: Session, collection_id: int, body: WorkflowSettingsUpdate, *, actor: Actor
) -> CollectionWorkflow:
    row = session.get(CollectionWorkflow, collection_id)
    if row is None:
        row = CollectionWorkflow(collection_id=collection_id, double_digitization=False, tolerance=None, version=0)
        session.add(row)
    before = _values(row)
    for name in body.model_fields_set & set(FIELDS):
        value = getattr(body, name)
        if name == "double_digitization" and value is None:
            continue
        setattr(row, name, value)
    _set_batch(row, body)
    changes = field_changes(before, _values(row))
    if not changes and row.version > 0:
        return row
    row.version += 1
    row.updated_by_id = actor.id
    row.updated_at = utcnow()
    session.flush()
    record_event(
        session,
        actor=actor,
        action="update",
        entity_type="collection_workflow",
        entity_id=collection_id,
        entity_version=row.version,
        changes=changes,
        reason=body.reason,
    )
    return row


def settings_read(row: CollectionWorkflow) -> WorkflowSettingsRead:
    return WorkflowSettingsRead(
        collection_id=row.collection_id,
        double_digitization=bool(row.double_digitization),
        tolerance=row.tolerance,
        batch_thresholds=batch_thresholds_of(row),
        batch_fit=batch_fit_of(row),
        version=row.version,
    )
