"""In-app notices: written in the same transaction as the change they announce; read and marked read by their
recipient only. They are a delivery aid, not a record: the audited change itself is in the audit trail."""

from __future__ import annotations

from collections.abc import Iterable

from sqlalchemy import func, select, update
from sqlalchemy.orm import Session

from tracedesk.errors import NotFound
from tracedesk.models import Notice
from tracedesk.models.base import utcnow

MAX_LISTED = 200


def notify(
    session: Session, user_ids: Iterable[int | None], *, kind: str, message: str, task_id: int | None, skip: int | None
) -> int:
    """One notice per distinct recipient (the person who caused it, ``skip``, is left out); returns the count."""
    recipients = sorted({user_id for user_id in user_ids if user_id is not None and user_id != skip})
    for user_id in recipients:
        session.add(Notice(user_id=user_id, kind=kind, task_id=task_id, message=message[:2000]))
    return len(recipients)


def notices_of(session: Session, user_id: int, *, unread_only: bool = False) -> list[Notice]:
    query = select(Notice).where(Notice.user_id == user_id)
    if unread_only:
        query = query.where(Notice.read_at.is_(None))
    return list(session.scalars(query.order_by(Notice.id.desc()).limit(MAX_LISTED)))


def unread_count(session: Session, user_id: int) -> int:
    query = select(func.count()).select_from(Notice).where(Notice.user_id == user_id, Notice.read_at.is_(None))
    return int(session.scalar(query) or 0)


def mark_read(session: Session, user_id: int, notice_id: int | None = None) -> int:
    """Mark one notice (or all of the user's) read; another person's notice is 404, never touched."""
    query = update(Notice).where(Notice.user_id == user_id, Notice.read_at.is_(None))
    if notice_id is not None:
        if session.scalar(select(Notice.id).where(Notice.id == notice_id, Notice.user_id == user_id)) is None:
            raise NotFound(f"no notice with id {notice_id}")
        query = query.where(Notice.id == notice_id)
    result = session.execute(query.values(read_at=utcnow()))
    return int(getattr(result, "rowcount", 0) or 0)
