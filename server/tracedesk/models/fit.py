"""Fits: a model fitted to a trace's samples, with the versions of the trace and calibration it came from."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import ForeignKey, Index, Integer, String, Text
from sqlalchemy.orm import Mapped, mapped_column

from tracedesk.models.base import Base, UTCDateTime, utcnow


class Fit(Base):
    __tablename__ = "fits"
    __table_args__ = (Index("ix_fits_trace_id_id", "trace_id", "id"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    trace_id: Mapped[int] = mapped_column(ForeignKey("traces.id"))
    family: Mapped[str] = mapped_column(String(40))
    options: Mapped[str] = mapped_column(Text)
    result: Mapped[str] = mapped_column(Text)
    trace_version: Mapped[int] = mapped_column(Integer)
    calibration_version: Mapped[int] = mapped_column(Integer)
    stale: Mapped[bool] = mapped_column(default=False)
    created_by_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"), nullable=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    version: Mapped[int] = mapped_column(Integer, default=1)
