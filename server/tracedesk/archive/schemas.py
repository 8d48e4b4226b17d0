"""Request and response bodies of the archive API."""

from __future__ import annotations

import json
from datetime import date, datetime
from typing import Any

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator


class CollectionCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")
    name: str = Field(min_length=1, max_length=200)
    description: str = Field(default="", max_length=10_000)
    site: str = Field(default="", max_length=200)
    instrument: str = Field(default="", max_length=200)
    period_start: date | None = None
    period_end: date | None = None
    notes: str = Field(default="", max_length=10_000)

    @model_validator(mode="after")
    def _period_in_order(self) -> CollectionCreate:
        if self.period_start and self.period_end and self.period_end < self.period_start:
            raise ValueError("period_end is before period_start")
        return self


class CollectionUpdate(BaseModel):
    model_config = ConfigDict(extra="forbid")
    name: str | None = Field(default=None, min_length=1, max_length=200)
    description: str | None = Field(default=None, max_length=10_000)
    site: str | None = Field(default=None, max_length=200)
    instrument: str | None = Field(default=None, max_length=200)
    period_start: date | None = None
    period_end: date | None = None
    notes: str | None = Field(default=None, max_length=10_000)
    reason: str | None = Field(default=None, max_length=2000)


class CollectionRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)
    id: int
    name: str
    description: str
    site: str
    instrument: str
    period_start: date | None
    period_end: date | None
    notes: str
    is_demo: bool
    created_at: datetime
    version: int
    sheet_count: int = 0


class SheetRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)
    id: int
    collection_id: int
    filename: str
    page_index: int
    width: int
    height: int
    dpi: float | None
    sha256: str = Field(description="SHA-256 of the uploaded file this page came from (the original bytes).")
    status: str
    source_ref: str
    recorded_from: str
    recorded_to: str
    station: str
    notes: str
    tags: list[str]
    created_at: datetime
    version: int
    tiles_url: str
    thumbnail_url: str

    @field_validator("tags", mode="before")
    @classmethod
    def _parse_tags(cls, value: Any) -> Any:
        return json.loads(value) if isinstance(value, str) else value


class SheetUpdate(BaseModel):
    """Archive metadata of a sheet. A reason is required once digitizing work has started on it."""

    model_config = ConfigDict(extra="forbid")
    source_ref: str | None = Field(default=None, max_length=200)
    recorded_from: str | None = Field(default=None, max_length=40)
    recorded_to: str | None = Field(default=None, max_length=40)
    station: str | None = Field(default=None, max_length=200)
    notes: str | None = Field(default=None, max_length=10_000)
    tags: list[str] | None = Field(default=None, max_length=50)
    reason: str | None = Field(default=None, max_length=2000)

    @field_validator("tags")
    @classmethod
    def _clean_tags(cls, value: list[str] | None) -> list[str] | None:
        if value is None:
            return None
        cleaned = sorted({tag.strip() for tag in value if tag.strip()})
        if any(len(tag) > 60 for tag in cleaned):
            raise ValueError("tags are at most 60 characters")
        return cleaned


class RefusedFile(BaseModel):
    filename: str
    reason: str
    status: int


class UploadResult(BaseModel):
    sheets: list[SheetRead]
    refused: list[RefusedFile]


class QueuedFile(BaseModel):
    """A file whose original is stored and whose decoding and tiling run as the job ``job_id``."""

    filename: str
    job_id: int


class QueuedUploadResult(BaseModel):
    """The answer to a background upload: follow each job at ``/api/v1/jobs/{job_id}``; its result names the
    new sheets, or its error the reason the file was refused."""

    queued: list[QueuedFile]
    refused: list[RefusedFile]


class SheetPage(BaseModel):
    items: list[SheetRead]
    next_cursor: str | None
