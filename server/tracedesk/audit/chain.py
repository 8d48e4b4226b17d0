"""Canonical encoding and hashing of audit events: h_n = SHA-256(h_{n-1} || canonical JSON of event n)."""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping
from datetime import date, datetime
from typing import Any

GENESIS_HASH = "0" * 64

HASHED_FIELDS = (
    "seq",
    "occurred_at",
    "actor_id",
    "actor_name",
    "action",
    "entity_type",
    "entity_id",
    "entity_version",
    "changes",
    "reason",
)


def json_default(value: Any) -> Any:
    """Encode dates as ISO 8601 text; anything else unknown is an error, never a silent str()."""
    if isinstance(value, datetime | date):
        return value.isoformat()
    raise TypeError(f"cannot encode {type(value).__name__} in an audit event")


def canonical_json(value: Any) -> str:
    """Sorted keys, no spaces, UTF-8 text: the same value always gives the same bytes."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False, default=json_default)


def event_hash(prev_hash: str, fields: Mapping[str, Any]) -> str:
    """The chain hash of one event given the previous hash (hex) and the event's hashed fields."""
    payload = canonical_json({name: fields[name] for name in HASHED_FIELDS})
    return hashlib.sha256(prev_hash.encode("ascii") + payload.encode("utf-8")).hexdigest()
