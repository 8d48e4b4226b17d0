"""Traces: one pen line of a sheet, its vertices in sheet-image pixels (manual or found automatically)."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import Float, ForeignKey, Index, Integer, String, Text
from sqlalchemy.orm import Mapped, mapped_column

from tracedesk.models.base import Base, UTCDateTime, utcnow


class Trace(Base):
    __tablename__ = "traces"
    __table_args__ = (Index("ix_traces_sheet_id_id", "sheet_id", "id"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    sheet_id: Mapped[int] = mapped_column(ForeignKey("sheets.id"))
    name: Mapped[str] = mapped_column(String(120))
    unit: Mapped[str] = mapped_column(String(60), default="")
    pen_color: Mapped[str] = mapped_column(String(7), default="")
    origin: Mapped[str] = mapped_column(String(20), default="manual")
    vertices: Mapped[str] = mapped_column(Text)
    confidence: Mapped[str] = mapped_column(Text, default="[]")
    gaps: Mapped[str] = mapped_column(Text, default="[]")
    line_width_px: Mapped[float] = mapped_column(Float, default=2.0)
    withdrawn_reason: Mapped[str | None] = mapped_column(Text, nullable=True)
    created_by_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"), nullable=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    updated_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    version: Mapped[int] = mapped_column(Integer, default=1)
