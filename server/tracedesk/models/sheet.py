"""Sheets: one scanned page each, with its derived images and archive metadata."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import ForeignKey, Index, Integer, String, Text, UniqueConstraint
from sqlalchemy.orm import Mapped, mapped_column

from tracedesk.models.base import Base, UTCDateTime, utcnow

SHEET_STATUSES = ("ready", "in_progress", "submitted", "approved", "withdrawn")


class Sheet(Base):
    __tablename__ = "sheets"
    __table_args__ = (
        UniqueConstraint("collection_id", "source_file_id", "page_index", name="uq_sheets_page_in_collection"),
        Index("ix_sheets_collection_id_id", "collection_id", "id"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    collection_id: Mapped[int] = mapped_column(ForeignKey("collections.id"))
    source_file_id: Mapped[int] = mapped_column(ForeignKey("source_files.id"), index=True)
    page_index: Mapped[int] = mapped_column(Integer, default=0)
    filename: Mapped[str] = mapped_column(String(255))
    width: Mapped[int] = mapped_column(Integer)
    height: Mapped[int] = mapped_column(Integer)
    dpi: Mapped[float | None] = mapped_column(nullable=True)
    status: Mapped[str] = mapped_column(String(20), default="ready")
    derived_key: Mapped[str] = mapped_column(String(100), unique=True)
    source_ref: Mapped[str] = mapped_column(String(200), default="")
    recorded_from: Mapped[str] = mapped_column(String(40), default="")
    recorded_to: Mapped[str] = mapped_column(String(40), default="")
    station: Mapped[str] = mapped_column(String(200), default="")
    notes: Mapped[str] = mapped_column(Text, default="")
    tags: Mapped[str] = mapped_column(Text, default="[]")
    created_by_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"), nullable=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    version: Mapped[int] = mapped_column(Integer, default=1)
