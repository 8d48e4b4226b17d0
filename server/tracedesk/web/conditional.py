"""RFC 9110 conditional requests: strong ETags from record versions, If-Match required on changes."""

from __future__ import annotations

from fastapi import Request, Response

from tracedesk.errors import PreconditionFailed, PreconditionRequired


def etag_for(kind: str, record_id: int, version: int) -> str:
    return f'"{kind}-{record_id}-v{version}"'


def set_etag(response: Response, kind: str, record_id: int, version: int) -> None:
    response.headers["ETag"] = etag_for(kind, record_id, version)


def require_if_match(request: Request, kind: str, record_id: int, version: int) -> None:
    """428 without If-Match; 412 when it names another version than the stored one."""
    header = request.headers.get("if-match")
    if not header:
        raise PreconditionRequired("send If-Match with the ETag you last read, so no one's change is overwritten")
    current = etag_for(kind, record_id, version)
    offered = {part.strip() for part in header.split(",")}
    if current not in offered and "*" not in offered:
        raise PreconditionFailed(
            f"this {kind} was changed by someone else (now version {version}); reload it and apply your change again",
            detail={"current_version": version},
        )
