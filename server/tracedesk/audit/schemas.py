"""Response bodies of the audit API."""

from __future__ import annotations

import json
from typing import Any

from pydantic import BaseModel, ConfigDict, field_validator


class AuditEventRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)
    seq: int
    occurred_at: str
    actor_id: int | None
    actor_name: str
    action: str
    entity_type: str
    entity_id: str
    entity_version: int | None
    changes: dict[str, Any]
    reason: str | None
    hash: str

    @field_validator("changes", mode="before")
    @classmethod
    def _parse_changes(cls, value: Any) -> Any:
        return json.loads(value) if isinstance(value, str) else value


class ChainReportRead(BaseModel):
    ok: bool
    events_checked: int
    first_broken_seq: int | None
    problem: str | None
