"""Batch runs: a collection digitizing itself (register, trace each expected pen, fit, score), sheet by sheet."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import ForeignKey, Integer, String, Text, UniqueConstraint
from sqlalchemy.orm import Mapped, mapped_column

from tracedesk.models.base import Base, UTCDateTime, utcnow

RUN_STATUSES = ("queued", "running", "finished", "failed")
ITEM_STATUSES = ("pending", "ready_for_review", "needs_person")


class BatchRun(Base):
    __tablename__ = "batch_runs"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    collection_id: Mapped[int] = mapped_column(ForeignKey("collections.id"), index=True)
    chart_spec_id: Mapped[int] = mapped_column(ForeignKey("chart_specs.id"))
    settings: Mapped[str] = mapped_column(Text)
    status: Mapped[str] = mapped_column(String(20), default="queued")
    job_id: Mapped[int | None] = mapped_column(ForeignKey("jobs.id"), nullable=True)
    created_by_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"), nullable=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    finished_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)


class BatchRunItem(Base):
    __tablename__ = "batch_run_items"
    __table_args__ = (UniqueConstraint("run_id", "sheet_id", name="uq_batch_run_items_run_sheet"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("batch_runs.id"), index=True)
    sheet_id: Mapped[int] = mapped_column(ForeignKey("sheets.id"))
    status: Mapped[str] = mapped_column(String(20), default="pending")
    score: Mapped[str] = mapped_column(Text, default="{}")
    reason: Mapped[str] = mapped_column(Text, default="")
    finished_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
