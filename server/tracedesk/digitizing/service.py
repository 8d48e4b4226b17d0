"""Digitizing use cases that span records: starting work on a sheet, re-deriving after a calibration change."""

from __future__ import annotations

from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor, record_event
from tracedesk.digitizing.fits import rederive_fits
from tracedesk.digitizing.traces import traces_of_sheet
from tracedesk.errors import Unprocessable
from tracedesk.models import Sheet


def mark_work_started(session: Session, sheet: Sheet, *, actor: Actor) -> None:
    """A sheet whose calibration or traces exist is "in progress"; metadata edits then need a reason."""
    if sheet.status == "ready":
        sheet.status = "in_progress"
        sheet.version += 1
        record_event(
            session,
            actor=actor,
            action="update",
            entity_type="sheet",
            entity_id=sheet.id,
            entity_version=sheet.version,
            changes={"status": {"old": "ready", "new": "in_progress"}},
            reason="digitizing started",
        )


def rederive_sheet(session: Session, sheet: Sheet, *, actor: Actor, cause: str) -> int:
    """Refit every fit of every trace on the sheet (samples are always derived on read)."""
    return sum(rederive_fits(session, trace, actor=actor, cause=cause) for trace in traces_of_sheet(session, sheet.id))


LOCKED_STATUSES = frozenset({"submitted", "approved"})


def require_reason_when_locked(sheet: Sheet, reason: str | None) -> None:
    """Changing submitted or approved work needs a reason in the audit trail (RELIABILITY.md, 21 CFR 11.10(e))."""
    if sheet.status in LOCKED_STATUSES and not (reason or "").strip():
        raise Unprocessable(
            f"this sheet is {sheet.status}: give a reason for the change (it voids any signature and is recorded)"
        )
