"""Workflow settings of a collection: double digitization, the agreement tolerance between technicians, and the
thresholds and fitted model its batch runs use."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import Boolean, Float, ForeignKey, Integer, Text
from sqlalchemy.orm import Mapped, mapped_column

from tracedesk.models.base import Base, UTCDateTime, utcnow


class CollectionWorkflow(Base):
    __tablename__ = "collection_workflows"

    collection_id: Mapped[int] = mapped_column(ForeignKey("collections.id"), primary_key=True, autoincrement=False)
    double_digitization: Mapped[bool] = mapped_column(Boolean, default=False)
    # Largest accepted difference between the two technicians' traces, in the traces' value units.
    tolerance: Mapped[float | None] = mapped_column(Float, nullable=True)
    # JSON {"thresholds": {...}, "fit": {...} | null} for batch runs; null until first saved (the defaults apply).
    batch_settings: Mapped[str | None] = mapped_column(Text, nullable=True)
    updated_by_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"), nullable=True)
    updated_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    version: Mapped[int] = mapped_column(Integer, default=1)
