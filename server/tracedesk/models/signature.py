"""Electronic signatures: a password-confirmed approval (or review) bound to the SHA-256 of a sheet's record.

Rows are never edited except to mark them withdrawn when their task is reopened; whether a signature still holds
is decided by comparing ``record_sha256`` with the hash of the sheet's record as it is now.
"""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import ForeignKey, Index, Integer, String, Text
from sqlalchemy.orm import Mapped, mapped_column

from tracedesk.models.base import Base, UTCDateTime, utcnow

SIGNATURE_MEANINGS = ("reviewed", "approved")


class Signature(Base):
    __tablename__ = "signatures"
    __table_args__ = (Index("ix_signatures_task_id_id", "task_id", "id"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    task_id: Mapped[int] = mapped_column(ForeignKey("tasks.id"))
    sheet_id: Mapped[int] = mapped_column(ForeignKey("sheets.id"), index=True)
    signer_id: Mapped[int] = mapped_column(ForeignKey("users.id"))
    printed_name: Mapped[str] = mapped_column(String(200))
    meaning: Mapped[str] = mapped_column(String(20))
    signed_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    record_sha256: Mapped[str] = mapped_column(String(64))
    # Versions of the calibration, traces and fits that were signed (JSON), to say what changed since.
    record_versions: Mapped[str] = mapped_column(Text)
    withdrawn_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    withdrawn_reason: Mapped[str | None] = mapped_column(Text, nullable=True)
