"""JSON routes: a record's history, the filtered log (admins) and the chain check."""

from __future__ import annotations

from dataclasses import asdict
from typing import Annotated

from fastapi import APIRouter, Depends, Query
from sqlalchemy import select

from tracedesk.accounts.permissions import Permission
from tracedesk.audit import service
from tracedesk.audit.schemas import AuditEventRead, ChainReportRead
from tracedesk.models import AuditEvent
from tracedesk.web.deps import Principal, SessionDep, requires

router = APIRouter(prefix="/api/v1/audit", tags=["audit"])
Reader = Annotated[Principal, Depends(requires(Permission.READ))]
Auditor = Annotated[Principal, Depends(requires(Permission.VERIFY_AUDIT))]


@router.get("/history/{entity_type}/{entity_id}", response_model=list[AuditEventRead])
def record_history(entity_type: str, entity_id: str, _: Reader, db: SessionDep) -> list[AuditEvent]:
    """Who changed what and when on one record (oldest first)."""
    return service.entity_history(db, entity_type, entity_id)


@router.get("/events", response_model=list[AuditEventRead])
def list_events(
    _: Auditor,
    db: SessionDep,
    entity_type: str | None = None,
    actor_id: int | None = None,
    action: str | None = None,
    after_seq: Annotated[int, Query(ge=0)] = 0,
    limit: Annotated[int, Query(ge=1, le=1000)] = 200,
) -> list[AuditEvent]:
    """The whole trail, filtered, in sequence order (keyset pagination with ``after_seq``)."""
    query = select(AuditEvent).where(AuditEvent.seq > after_seq)
    if entity_type:
        query = query.where(AuditEvent.entity_type == entity_type)
    if actor_id is not None:
        query = query.where(AuditEvent.actor_id == actor_id)
    if action:
        query = query.where(AuditEvent.action == action)
    return list(db.scalars(query.order_by(AuditEvent.seq).limit(limit)))


@router.get("/verify", response_model=ChainReportRead)
def verify(_: Auditor, db: SessionDep) -> ChainReportRead:
    """Recompute the hash chain; names the first broken sequence number, if any."""
    return ChainReportRead(**asdict(service.verify_chain(db)))
