"""Sheet selections as people type them (``"3,5,9-12"``), and the collection's sheets a selection names."""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.archive.service import get_collection
from tracedesk.errors import Unprocessable
from tracedesk.models import Sheet

MAX_SELECTED = 2000
MAX_ID = 2_147_483_647  # the database's integer range


def parse_sheet_ids(text: str | None) -> list[int] | None:
    """``"3,5,9-12"`` -> [3, 5, 9, 10, 11, 12]; None when nothing is given (meaning: all sheets)."""
    if not text or not text.strip():
        return None
    ids: list[int] = []
    try:
        for part in text.split(","):
            low, _, high = part.strip().partition("-")
            first, last = int(low), int(high) if high else int(low)
            if last - first >= MAX_SELECTED or not (1 <= first <= last <= MAX_ID):
                raise ValueError("not a range of sheet ids")
            ids += range(first, last + 1)
    except ValueError as error:
        raise Unprocessable(f"sheet ids: give at most {MAX_SELECTED} numbers and ranges like 3,5,9-12") from error
    if len(ids) > MAX_SELECTED:
        raise Unprocessable(f"sheet ids: at most {MAX_SELECTED} sheets at a time")
    return ids


def collection_sheets(session: Session, collection_id: int, sheet_ids: list[int] | None) -> list[Sheet]:
    """The collection's sheets in id order: all of them (``sheet_ids`` None) or the listed ones, each of which must
    belong to the collection (422 naming the first that does not); at most ``MAX_SELECTED``."""
    get_collection(session, collection_id)
    query = select(Sheet).where(Sheet.collection_id == collection_id).order_by(Sheet.id)
    if sheet_ids is not None:
        query = query.where(Sheet.id.in_(sheet_ids))
    sheets = list(session.scalars(query))
    missing = sorted(set(sheet_ids or []) - {sheet.id for sheet in sheets})
    if missing:
        raise Unprocessable(f"sheet {missing[0]} is not in collection {collection_id}")
    if len(sheets) > MAX_SELECTED:
        raise Unprocessable(f"at most {MAX_SELECTED} sheets per export: select fewer with sheet_ids")
    return sheets
