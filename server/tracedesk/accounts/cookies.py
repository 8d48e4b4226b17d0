"""The session cookie's flags (RELIABILITY.md: HttpOnly, SameSite=Lax, Secure over HTTPS)."""

from __future__ import annotations

from fastapi import Response

from tracedesk.config import Settings
from tracedesk.web.deps import SESSION_COOKIE

LOGIN_CSRF_COOKIE = "tracedesk_login_csrf"


def set_session_cookie(response: Response, settings: Settings, raw: str) -> None:
    response.set_cookie(
        SESSION_COOKIE,
        raw,
        max_age=settings.session_absolute_timeout,
        httponly=True,
        samesite="lax",
        secure=settings.secure_cookies,
        path="/",
    )


def clear_session_cookie(response: Response) -> None:
    response.delete_cookie(SESSION_COOKIE, path="/")
