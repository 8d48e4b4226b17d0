"""Tasks: a sheet's digitizing assignment (one per sheet) and where it stands in the review state machine."""

from __future__ import annotations

from datetime import date, datetime

from sqlalchemy import Boolean, Date, ForeignKey, Index, Integer, String, Text
from sqlalchemy.orm import Mapped, mapped_column

from tracedesk.models.base import Base, UTCDateTime, utcnow

TASK_STATES = ("open", "in_progress", "submitted", "returned", "approved", "withdrawn")
TASK_PRIORITIES = ("low", "normal", "high", "urgent")


class Task(Base):
    __tablename__ = "tasks"
    __table_args__ = (
        Index("ix_tasks_collection_id_state", "collection_id", "state"),
        Index("ix_tasks_technician_id_state", "technician_id", "state"),
        Index("ix_tasks_second_technician_id", "second_technician_id"),
        Index("ix_tasks_reviewer_id_state", "reviewer_id", "state"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    sheet_id: Mapped[int] = mapped_column(ForeignKey("sheets.id"), unique=True)
    collection_id: Mapped[int] = mapped_column(ForeignKey("collections.id"))
    state: Mapped[str] = mapped_column(String(20), default="open")
    technician_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"), nullable=True)
    # Set only for double digitization: a second technician digitizes the same sheet independently.
    second_technician_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"), nullable=True)
    reviewer_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"), nullable=True)
    priority: Mapped[str] = mapped_column(String(10), default="normal")
    due_date: Mapped[date | None] = mapped_column(Date, nullable=True)
    double_digitization: Mapped[bool] = mapped_column(Boolean, default=False)
    technician_submitted: Mapped[bool] = mapped_column(Boolean, default=False)
    second_submitted: Mapped[bool] = mapped_column(Boolean, default=False)
    # The reason given with the latest return, withdrawal or reopening (the audit trail keeps them all).
    reason: Mapped[str | None] = mapped_column(Text, nullable=True)
    submitted_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    approved_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    created_by_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"), nullable=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    updated_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    version: Mapped[int] = mapped_column(Integer, default=1)
