"""Archive use cases: collections, sheet listing (keyset pages), sheet metadata. Never commits."""

from __future__ import annotations

import base64
import json
from dataclasses import dataclass
from typing import Any

from sqlalchemy import func, or_, select
from sqlalchemy.orm import Session

from tracedesk.archive.schemas import CollectionCreate, CollectionUpdate, SheetUpdate
from tracedesk.audit.service import Actor, created_fields, field_changes, record_event
from tracedesk.errors import Conflict, NotFound, Unprocessable
from tracedesk.models import Collection, Sheet, SourceFile

COLLECTION_FIELDS = ("name", "description", "site", "instrument", "period_start", "period_end", "notes")
SHEET_FIELDS = ("source_ref", "recorded_from", "recorded_to", "station", "notes", "tags")
# Statuses after which metadata edits must say why (the record is part of digitizing work).
WORK_STARTED = frozenset({"in_progress", "submitted", "approved"})
MAX_PAGE = 200


def _values(record: object, names: tuple[str, ...]) -> dict[str, Any]:
    return {name: getattr(record, name) for name in names}


def get_collection(session: Session, collection_id: int) -> Collection:
    collection = session.get(Collection, collection_id)
    if collection is None:
        raise NotFound(f"no collection with id {collection_id}")
    return collection


def _name_taken(session: Session, name: str, *, other_than: int | None = None) -> bool:
    query = select(Collection.id).where(func.lower(Collection.name) == name.strip().lower())
    if other_than is not None:
        query = query.where(Collection.id != other_than)
    return session.scalar(query) is not None


def create_collection(session: Session, body: CollectionCreate, *, actor: Actor, is_demo: bool = False) -> Collection:
    if _name_taken(session, body.name):
        raise Conflict(f"a collection named {body.name.strip()!r} exists already")
    collection = Collection(**body.model_dump(), is_demo=is_demo, created_by_id=actor.id)
    collection.name = collection.name.strip()
    session.add(collection)
    session.flush()
    record_event(
        session,
        actor=actor,
        action="create",
        entity_type="collection",
        entity_id=collection.id,
        entity_version=collection.version,
        changes=created_fields(_values(collection, COLLECTION_FIELDS)),
    )
    return collection


def update_collection(session: Session, collection: Collection, body: CollectionUpdate, *, actor: Actor) -> Collection:
    changes_in = body.model_dump(exclude_unset=True, exclude={"reason"})
    if (
        "name" in changes_in
        and changes_in["name"] is not None
        and _name_taken(session, changes_in["name"], other_than=collection.id)
    ):
        raise Conflict(f"a collection named {changes_in['name'].strip()!r} exists already")
    before = _values(collection, COLLECTION_FIELDS)
    for name, value in changes_in.items():
        if value is not None or name in {"period_start", "period_end"}:
            setattr(collection, name, value)
    if collection.period_start and collection.period_end and collection.period_end < collection.period_start:
        raise Unprocessable("period_end is before period_start")
    changes = field_changes(before, _values(collection, COLLECTION_FIELDS))
    if changes:
        collection.version += 1
        record_event(
            session,
            actor=actor,
            action="update",
            entity_type="collection",
            entity_id=collection.id,
            entity_version=collection.version,
            changes=changes,
            reason=body.reason,
        )
    return collection


def list_collections(session: Session) -> list[tuple[Collection, int]]:
    counts = select(Sheet.collection_id, func.count().label("n")).group_by(Sheet.collection_id).subquery()
    rows = session.execute(
        select(Collection, func.coalesce(counts.c.n, 0))
        .outerjoin(counts, counts.c.collection_id == Collection.id)
        .order_by(Collection.name)
    ).all()
    return [(row[0], int(row[1])) for row in rows]


def count_sheets(session: Session, collection_id: int) -> int:
    return int(session.scalar(select(func.count()).select_from(Sheet).where(Sheet.collection_id == collection_id)) or 0)


@dataclass(frozen=True)
class SheetWithSource:
    sheet: Sheet
    source: SourceFile


def get_sheet(session: Session, sheet_id: int) -> SheetWithSource:
    row = session.execute(
        select(Sheet, SourceFile).join(SourceFile, SourceFile.id == Sheet.source_file_id).where(Sheet.id == sheet_id)
    ).first()
    if row is None:
        raise NotFound(f"no sheet with id {sheet_id}")
    return SheetWithSource(row[0], row[1])


def encode_cursor(last_id: int) -> str:
    return base64.urlsafe_b64encode(json.dumps({"after": last_id}).encode()).decode().rstrip("=")


def decode_cursor(cursor: str) -> int:
    try:
        padded = cursor + "=" * (-len(cursor) % 4)
        value = json.loads(base64.urlsafe_b64decode(padded.encode()))["after"]
    except (ValueError, KeyError, TypeError) as error:
        raise Unprocessable("the cursor is not one this service handed out") from error
    if not isinstance(value, int):
        raise Unprocessable("the cursor is not one this service handed out")
    return value


def _search_filter(q: str) -> Any:
    pattern = f"%{q.strip().lower()}%"
    columns = (Sheet.filename, Sheet.source_ref, Sheet.station, Sheet.notes, Sheet.tags)
    return or_(*(func.lower(column).like(pattern) for column in columns))


def list_sheets(
    session: Session,
    *,
    collection_id: int | None = None,
    q: str | None = None,
    status: str | None = None,
    limit: int = 50,
    cursor: str | None = None,
) -> tuple[list[SheetWithSource], str | None]:
    """A page of sheets in id order, newest last, using keyset pagination (``cursor`` = the last id seen)."""
    limit = max(1, min(limit, MAX_PAGE))
    conditions = []
    if collection_id is not None:
        conditions.append(Sheet.collection_id == collection_id)
    if q:
        conditions.append(_search_filter(q))
    if status:
        conditions.append(Sheet.status == status)
    if cursor:
        conditions.append(Sheet.id > decode_cursor(cursor))
    query = (
        select(Sheet, SourceFile)
        .join(SourceFile, SourceFile.id == Sheet.source_file_id)
        .where(*conditions)
        .order_by(Sheet.id)
        .limit(limit + 1)
    )
    rows = [SheetWithSource(row[0], row[1]) for row in session.execute(query)]
    next_cursor = encode_cursor(rows[limit - 1].sheet.id) if len(rows) > limit else None
    return rows[:limit], next_cursor


def update_sheet(session: Session, sheet: Sheet, body: SheetUpdate, *, actor: Actor) -> Sheet:
    """Edit archive metadata; once work has started on the sheet a reason is required (audit trail)."""
    updates = body.model_dump(exclude_unset=True, exclude={"reason"})
    if "tags" in updates:
        updates["tags"] = json.dumps(updates["tags"] or [])
    before = _values(sheet, SHEET_FIELDS)
    after = {**before, **{name: value for name, value in updates.items() if value is not None}}
    changes = field_changes(before, after)
    if not changes:
        return sheet
    if sheet.status in WORK_STARTED and not (body.reason or "").strip():
        raise Unprocessable("work has started on this sheet: give a reason for changing its metadata")
    for name, value in after.items():
        setattr(sheet, name, value)
    sheet.version += 1
    record_event(
        session,
        actor=actor,
        action="update",
        entity_type="sheet",
        entity_id=sheet.id,
        entity_version=sheet.version,
        changes=changes,
        reason=body.reason,
    )
    return sheet
