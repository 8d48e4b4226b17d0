"""HTML routes of the exports: the admins' filtered audit log, with its CSV download and the chain check."""

from __future__ import annotations

import json
from datetime import date
from typing import Annotated
from urllib.parse import urlencode

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import HTMLResponse, Response
from sqlalchemy import select

from tracedesk.accounts.permissions import Permission
from tracedesk.exports.audit_log import AuditFilters, count_matching, distinct_values, page_of_events
from tracedesk.models import User
from tracedesk.web.deps import Principal, SessionDep, requires
from tracedesk.web.templating import render

router = APIRouter(include_in_schema=False)
Auditor = Annotated[Principal, Depends(requires(Permission.VERIFY_AUDIT))]
PAGE_SIZE = 100


@router.get("/admin/audit/log", response_class=HTMLResponse)
def filtered_audit_log(
    request: Request,
    principal: Auditor,
    db: SessionDep,
    entity_type: str = "",
    entity_id: Annotated[str, Query(max_length=64)] = "",
    actor_id: str = "",
    action: str = "",
    since: date | None = None,
    until: date | None = None,
    before: int | None = None,
) -> Response:
    """The audit trail filtered by record, person, action and UTC dates, newest first, 100 at a time."""
    filters = AuditFilters(
        entity_type=entity_type or None,
        entity_id=entity_id or None,
        actor_id=int(actor_id) if actor_id.strip().isdigit() else None,
        action=action or None,
        since=since,
        until=until,
    )
    events, next_before = page_of_events(db, filters, before_seq=before, limit=PAGE_SIZE)
    query = {name: value for name, value in filters.as_dict().items() if value is not None}
    context = {
        "filters": filters,
        "rows": [{"event": event, "changes": json.loads(event.changes)} for event in events],
        "matching": count_matching(db, filters),
        "choices": distinct_values(db),
        "people": list(db.scalars(select(User).order_by(User.display_name))),
        "query": urlencode(query),
        "next_query": urlencode({**query, "before": next_before}) if next_before else "",
    }
    return render(request, "exports/audit_log.html", principal, context)
