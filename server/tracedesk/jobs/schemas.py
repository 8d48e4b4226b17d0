"""Response body of the jobs API."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from pydantic import BaseModel


class JobRead(BaseModel):
    id: int
    kind: str
    status: str
    progress: float
    message: str
    result: dict[str, Any] | None
    error: str | None
    attempts: int
    created_at: datetime
    started_at: datetime | None
    finished_at: datetime | None
