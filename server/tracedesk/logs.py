"""Structured logging: one JSON object per line, with the request id of the request being served."""

from __future__ import annotations

import json
import logging
import sys
from contextvars import ContextVar
from datetime import UTC, datetime

request_id_var: ContextVar[str] = ContextVar("request_id", default="-")


class JsonLineFormatter(logging.Formatter):
    """Render a record as a JSON line: time (UTC, ISO 8601), level, logger, message, request id, extras."""

    def format(self, record: logging.LogRecord) -> str:
        body = {
            "time": datetime.fromtimestamp(record.created, UTC).isoformat(timespec="milliseconds"),
            "level": record.levelname.lower(),
            "logger": record.name,
            "message": record.getMessage(),
            "request_id": request_id_var.get(),
        }
        fields = getattr(record, "fields", None)
        if isinstance(fields, dict):
            body.update(fields)
        if record.exc_info:
            body["error"] = self.formatException(record.exc_info)
        return json.dumps(body, default=str)


def configure_logging(level: str = "INFO") -> None:
    """Send Tracedesk's logs to standard error as JSON lines (idempotent)."""
    logger = logging.getLogger("tracedesk")
    if any(isinstance(handler.formatter, JsonLineFormatter) for handler in logger.handlers):
        return
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(JsonLineFormatter())
    logger.addHandler(handler)
    logger.setLevel(level)
    logger.propagate = False
