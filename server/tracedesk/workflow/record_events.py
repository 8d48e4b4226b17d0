"""Audit events about a sheet's digitized record (its calibration, traces and fits, withdrawn ones included)."""

from __future__ import annotations

from typing import Any

from sqlalchemy import and_, or_, select
from sqlalchemy.orm import Session

from tracedesk.models import AuditEvent, Fit, Trace


def record_entity_condition(session: Session, sheet_id: int) -> Any:
    """A WHERE condition on ``AuditEvent`` matching every event about the sheet's calibration, traces and fits.

    The calibration's events carry the sheet id as their entity id (see ``digitizing.calibrations``).
    """
    trace_ids = [str(i) for i in session.scalars(select(Trace.id).where(Trace.sheet_id == sheet_id))]
    fit_ids = [
        str(i)
        for i in session.scalars(select(Fit.id).join(Trace, Trace.id == Fit.trace_id).where(Trace.sheet_id == sheet_id))
    ]
    parts = [and_(AuditEvent.entity_type == "calibration", AuditEvent.entity_id == str(sheet_id))]
    if trace_ids:
        parts.append(and_(AuditEvent.entity_type == "trace", AuditEvent.entity_id.in_(trace_ids)))
    if fit_ids:
        parts.append(and_(AuditEvent.entity_type == "fit", AuditEvent.entity_id.in_(fit_ids)))
    return or_(*parts)


def record_events(
    session: Session, sheet_id: int, *, after_seq: int = 0, up_to_seq: int | None = None
) -> list[AuditEvent]:
    """Events about the sheet's record with ``after_seq < seq <= up_to_seq``, oldest first."""
    query = select(AuditEvent).where(record_entity_condition(session, sheet_id), AuditEvent.seq > after_seq)
    if up_to_seq is not None:
        query = query.where(AuditEvent.seq <= up_to_seq)
    return list(session.scalars(query.order_by(AuditEvent.seq)))
