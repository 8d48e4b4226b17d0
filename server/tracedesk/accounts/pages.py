"""HTML routes: the login form, logging out, and the admins' user page."""

from __future__ import annotations

import hmac
import secrets
from typing import Annotated
from urllib.parse import urlsplit

from fastapi import APIRouter, Depends, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from tracedesk.accounts import service
from tracedesk.accounts.cookies import LOGIN_CSRF_COOKIE, clear_session_cookie, set_session_cookie
from tracedesk.accounts.permissions import Permission
from tracedesk.errors import AppError, Forbidden, NotFound
from tracedesk.models import User
from tracedesk.models.user import ROLES
from tracedesk.web.deps import CurrentPrincipal, OptionalPrincipal, Principal, SessionDep, client_address, requires
from tracedesk.web.state import app_state
from tracedesk.web.templating import render

router = APIRouter(include_in_schema=False)
Admin = Annotated[Principal, Depends(requires(Permission.MANAGE_USERS))]


def _safe_next(target: str) -> str:
    """Only same-site relative paths, so the login form cannot be used as an open redirect."""
    parts = urlsplit(target)
    if parts.scheme or parts.netloc or not target.startswith("/") or target.startswith("//"):
        return "/"
    return target


def _login_page(request: Request, *, next_path: str, message: str = "", status_code: int = 200) -> Response:
    token = secrets.token_urlsafe(32)
    context = {"next": next_path, "message": message, "login_csrf": token}
    response = render(request, "accounts/login.html", None, context, status_code=status_code)
    response.set_cookie(LOGIN_CSRF_COOKIE, token, httponly=True, samesite="strict", path="/login")
    return response


@router.get("/login", response_class=HTMLResponse)
def login_form(request: Request, principal: OptionalPrincipal, next: str = "/") -> Response:
    if principal is not None:
        return RedirectResponse(_safe_next(next), status_code=303)
    return _login_page(request, next_path=_safe_next(next))


@router.post("/login", response_class=HTMLResponse)
def login_submit(
    request: Request,
    db: SessionDep,
    username: Annotated[str, Form(max_length=64)],
    password: Annotated[str, Form(max_length=1024)],
    login_csrf: Annotated[str, Form()] = "",
    next: Annotated[str, Form()] = "/",
) -> Response:
    expected = request.cookies.get(LOGIN_CSRF_COOKIE, "")
    if not expected or not hmac.compare_digest(expected, login_csrf):
        raise Forbidden("the login form expired; reload the page and try again")
    state = app_state(request)
    outcome = service.authenticate(
        db, state.settings, state.hasher, username=username, password=password, address=client_address(request)
    )
    if outcome.user is None:
        message = (
            "Too many failed attempts; wait a few minutes."
            if outcome.throttled
            else ("Wrong user name or password, or the account is disabled.")
        )
        return _login_page(
            request, next_path=_safe_next(next), message=message, status_code=429 if outcome.throttled else 401
        )
    raw, _ = service.start_web_session(db, outcome.user, address=client_address(request))
    response = RedirectResponse(_safe_next(next), status_code=303)
    set_session_cookie(response, state.settings, raw)
    response.delete_cookie(LOGIN_CSRF_COOKIE, path="/login")
    return response


@router.post("/logout")
def logout(principal: CurrentPrincipal, db: SessionDep) -> Response:
    if principal.web_session is not None:
        service.end_web_session(db, principal.web_session, principal.user)
    response = RedirectResponse("/login", status_code=303)
    clear_session_cookie(response)
    return response


@router.get("/admin/users", response_class=HTMLResponse)
def users_page(request: Request, principal: Admin, db: SessionDep) -> Response:
    context = {"users": service.list_users(db), "roles": ROLES, "message": ""}
    return render(request, "accounts/users.html", principal, context)


@router.post("/admin/users", response_class=HTMLResponse)
def users_add(
    request: Request,
    principal: Admin,
    db: SessionDep,
    username: Annotated[str, Form(max_length=64)],
    role: Annotated[str, Form()],
    password: Annotated[str, Form(max_length=256)],
    display_name: Annotated[str, Form(max_length=200)] = "",
) -> Response:
    try:
        service.create_user(
            db,
            app_state(request).hasher,
            actor=principal.actor,
            username=username,
            password=password,
            role=role,
            display_name=display_name,
        )
    except AppError as error:
        context = {"users": service.list_users(db), "roles": ROLES, "message": error.message}
        return render(request, "accounts/users.html", principal, context, status_code=error.status_code)
    return RedirectResponse("/admin/users", status_code=303)


@router.post("/admin/users/{user_id}", response_class=HTMLResponse)
def users_change(
    user_id: int,
    principal: Admin,
    db: SessionDep,
    role: Annotated[str | None, Form()] = None,
    active: Annotated[str | None, Form()] = None,
) -> Response:
    user = db.get(User, user_id)
    if user is None:
        raise NotFound(f"no user with id {user_id}")
    is_active = None if active is None else active == "yes"
    service.update_user(db, user, actor=principal.actor, role=role or None, is_active=is_active)
    return RedirectResponse("/admin/users", status_code=303)
