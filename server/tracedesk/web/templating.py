"""Jinja2 set-up: templates under web/templates, autoescaped, with the principal and CSRF token in context."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from fastapi import Request
from fastapi.responses import HTMLResponse
from fastapi.templating import Jinja2Templates

from tracedesk import __version__
from tracedesk.web.deps import Principal
from tracedesk.web.state import app_state

WEB_ROOT = Path(__file__).resolve().parents[3] / "web"


def web_root() -> Path:
    """The web/ folder (templates and static files) of this checkout or installation."""
    return WEB_ROOT


def build_templates() -> Jinja2Templates:
    templates = Jinja2Templates(directory=str(WEB_ROOT / "templates"))
    templates.env.globals["app_version"] = __version__
    return templates


def render(
    request: Request,
    name: str,
    principal: Principal | None,
    context: dict[str, Any] | None = None,
    *,
    status_code: int = 200,
) -> HTMLResponse:
    """Render a page with the signed-in user and their CSRF token available to every template."""
    values: dict[str, Any] = {
        "principal": principal,
        "user": principal.user if principal else None,
        "csrf_token": principal.web_session.csrf_token if principal and principal.web_session else "",
    }
    values.update(context or {})
    return app_state(request).templates.TemplateResponse(request, name, values, status_code=status_code)
