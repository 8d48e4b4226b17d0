"""Turning archive rows into API bodies (the sheet body joins the source file's SHA-256)."""

from __future__ import annotations

from tracedesk.archive.schemas import CollectionRead, SheetRead
from tracedesk.archive.service import SheetWithSource
from tracedesk.models import Collection


def sheet_read(item: SheetWithSource) -> SheetRead:
    sheet = item.sheet
    return SheetRead.model_validate(
        {
            **{column: getattr(sheet, column) for column in SheetRead.model_fields if hasattr(sheet, column)},
            "sha256": item.source.sha256,
            "tiles_url": f"/api/v1/sheets/{sheet.id}/tiles/sheet.dzi",
            "thumbnail_url": f"/api/v1/sheets/{sheet.id}/thumbnail",
        }
    )


def collection_read(collection: Collection, sheet_count: int) -> CollectionRead:
    body = CollectionRead.model_validate(collection)
    body.sheet_count = sheet_count
    return body
