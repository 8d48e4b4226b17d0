"""A collection's workflow settings (double digitization, agreement tolerance). Never commits."""

from __future__ import annotations

from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor, field_changes, record_event
from tracedesk.models import CollectionWorkflow
from tracedesk.models.base import utcnow
from tracedesk.workflow.schemas import WorkflowSettingsRead, WorkflowSettingsUpdate

FIELDS = ("double_digitization", "tolerance")


def settings_of(session: Session, collection_id: int) -> CollectionWorkflow:
    """The stored settings, or the defaults (version 0, not stored) when none were ever saved."""
    row = session.get(CollectionWorkflow, collection_id)
    if row is None:
        return CollectionWorkflow(collection_id=collection_id, double_digitization=False, tolerance=None, version=0)
    return row


def update_settings(
    session: Session, collection_id: int, body: WorkflowSettingsUpdate, *, actor: Actor
) -> CollectionWorkflow:
    row = session.get(CollectionWorkflow, collection_id)
    if row is None:
        row = CollectionWorkflow(collection_id=collection_id, double_digitization=False, tolerance=None, version=0)
        session.add(row)
    before = {name: getattr(row, name) for name in FIELDS}
    for name in body.model_fields_set & set(FIELDS):
        value = getattr(body, name)
        if name == "double_digitization" and value is None:
            continue
        setattr(row, name, value)
    changes = field_changes(before, {name: getattr(row, name) for name in FIELDS})
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
        version=row.version,
    )
