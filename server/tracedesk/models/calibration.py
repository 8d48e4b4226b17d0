"""A sheet's calibration: the mapping from pixels to chart values. One row per sheet, versioned; every version's
full specification and residual report is kept in the audit trail."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import ForeignKey, Integer, String, Text
from sqlalchemy.orm import Mapped, mapped_column

from tracedesk.models.base import Base, UTCDateTime, utcnow


class Calibration(Base):
    __tablename__ = "calibrations"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    sheet_id: Mapped[int] = mapped_column(ForeignKey("sheets.id"), unique=True)
    kind: Mapped[str] = mapped_column(String(20))
    spec: Mapped[str] = mapped_column(Text)
    report: Mapped[str] = mapped_column(Text)
    origin: Mapped[str] = mapped_column(String(20), default="manual")
    updated_by_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"), nullable=True)
    updated_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    version: Mapped[int] = mapped_column(Integer, default=1)
