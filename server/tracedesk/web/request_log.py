"""ASGI middleware: give every request an id (kept from a sane X-Request-ID header), echo it, log the request."""

from __future__ import annotations

import logging
import re
import time
import uuid

from starlette.types import ASGIApp, Message, Receive, Scope, Send

from tracedesk.logs import request_id_var

REQUEST_ID_HEADER = b"x-request-id"
SANE_ID = re.compile(rb"^[A-Za-z0-9._-]{8,64}$")
log = logging.getLogger("tracedesk.requests")


class RequestLogMiddleware:
    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    def _request_id(self, scope: Scope) -> str:
        for name, value in scope.get("headers", []):
            if name == REQUEST_ID_HEADER and SANE_ID.match(value):
                return str(value.decode("ascii"))
        return uuid.uuid4().hex

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        request_id = self._request_id(scope)
        token = request_id_var.set(request_id)
        started = time.perf_counter()
        status = 500

        async def send_with_id(message: Message) -> None:
            nonlocal status
            if message["type"] == "http.response.start":
                status = message["status"]
                message["headers"] = [*message.get("headers", []), (REQUEST_ID_HEADER, request_id.encode("ascii"))]
            await send(message)

        try:
            await self.app(scope, receive, send_with_id)
        finally:
            elapsed_ms = round((time.perf_counter() - started) * 1000, 2)
            fields = {"method": scope["method"], "path": scope["path"], "status": status, "duration_ms": elapsed_ms}
            log.info("request", extra={"fields": fields})
            request_id_var.reset(token)
