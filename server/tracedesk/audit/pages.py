"""HTML routes: a record's history and the admins' audit log with the chain check."""

from __future__ import annotations

import json
from typing import Annotated

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, Response
from sqlalchemy import select

from tracedesk.accounts.permissions import Permission
from tracedesk.audit import service
from tracedesk.models import AuditEvent
from tracedesk.web.deps import Principal, SessionDep, requires
from tracedesk.web.templating import render

router = APIRouter(include_in_schema=False)
Reader = Annotated[Principal, Depends(requires(Permission.READ))]
Auditor = Annotated[Principal, Depends(requires(Permission.VERIFY_AUDIT))]


def _rows(events: list[AuditEvent]) -> list[dict[str, object]]:
    return [{"event": event, "changes": json.loads(event.changes)} for event in events]


@router.get("/history/{entity_type}/{entity_id}", response_class=HTMLResponse)
def history_page(request: Request, entity_type: str, entity_id: str, principal: Reader, db: SessionDep) -> Response:
    events = service.entity_history(db, entity_type, entity_id)
    context = {"entity_type": entity_type, "entity_id": entity_id, "rows": _rows(events)}
    return render(request, "audit/history.html", principal, context)


@router.get("/admin/audit", response_class=HTMLResponse)
def audit_log_page(request: Request, principal: Auditor, db: SessionDep, check: bool = False) -> Response:
    events = list(db.scalars(select(AuditEvent).order_by(AuditEvent.seq.desc()).limit(200)))
    report = service.verify_chain(db) if check else None
    context = {"rows": _rows(events), "report": report, "total": service.count_events(db)}
    return render(request, "audit/log.html", principal, context)
