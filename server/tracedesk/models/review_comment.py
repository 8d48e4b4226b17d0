"""Review comments on a task, optionally pinned to a position on the sheet (pixels, top-left origin)."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import Float, ForeignKey, Index, Integer, Text
from sqlalchemy.orm import Mapped, mapped_column

from tracedesk.models.base import Base, UTCDateTime, utcnow


class ReviewComment(Base):
    __tablename__ = "review_comments"
    __table_args__ = (Index("ix_review_comments_task_id_id", "task_id", "id"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    task_id: Mapped[int] = mapped_column(ForeignKey("tasks.id"))
    sheet_id: Mapped[int] = mapped_column(ForeignKey("sheets.id"))
    author_id: Mapped[int] = mapped_column(ForeignKey("users.id"))
    body: Mapped[str] = mapped_column(Text)
    # Continuous sheet-image pixel coordinates (ARCHITECTURE.md); both None for a comment on the whole sheet.
    u: Mapped[float | None] = mapped_column(Float, nullable=True)
    v: Mapped[float | None] = mapped_column(Float, nullable=True)
    trace_id: Mapped[int | None] = mapped_column(ForeignKey("traces.id"), nullable=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    resolved_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    resolved_by_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"), nullable=True)
    version: Mapped[int] = mapped_column(Integer, default=1)
