"""JSON routes for sessions, users and API tokens under /api/v1."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Request, Response
from fastapi.responses import JSONResponse

from tracedesk.accounts import service
from tracedesk.accounts.cookies import clear_session_cookie, set_session_cookie
from tracedesk.accounts.permissions import Permission
from tracedesk.accounts.schemas import (
    LoginRequest,
    SessionRead,
    TokenCreate,
    TokenCreated,
    TokenRead,
    UserCreate,
    UserRead,
    UserUpdate,
)
from tracedesk.errors import NotFound
from tracedesk.models import ApiToken, User
from tracedesk.web.conditional import require_if_match, set_etag
from tracedesk.web.deps import CurrentPrincipal, Principal, SessionDep, client_address, requires
from tracedesk.web.state import app_state

router = APIRouter(prefix="/api/v1", tags=["accounts"])
Admin = Annotated[Principal, Depends(requires(Permission.MANAGE_USERS))]
LOGIN_REFUSED = "wrong user name or password, or the account is disabled"


@router.post("/session", response_model=SessionRead, responses={401: {}, 429: {}})
def log_in(body: LoginRequest, request: Request, db: SessionDep) -> Response:
    """Start a browser session (cookie) from a user name and password; returns the CSRF token for later calls."""
    state = app_state(request)
    outcome = service.authenticate(
        db,
        state.settings,
        state.hasher,
        username=body.username,
        password=body.password,
        address=client_address(request),
    )
    if outcome.throttled:
        return JSONResponse({"detail": "too many failed logins; wait a few minutes"}, status_code=429)
    if outcome.user is None:
        return JSONResponse({"detail": LOGIN_REFUSED, "code": "not_authenticated"}, status_code=401)
    raw, web_session = service.start_web_session(db, outcome.user, address=client_address(request))
    body_out = SessionRead(user=UserRead.model_validate(outcome.user), csrf_token=web_session.csrf_token)
    response = JSONResponse(body_out.model_dump(mode="json"))
    set_session_cookie(response, state.settings, raw)
    return response


@router.delete("/session", status_code=204)
def log_out(principal: CurrentPrincipal, db: SessionDep) -> Response:
    if principal.web_session is not None:
        service.end_web_session(db, principal.web_session, principal.user)
    response = Response(status_code=204)
    clear_session_cookie(response)
    return response


@router.get("/me", response_model=UserRead)
def who_am_i(principal: CurrentPrincipal) -> User:
    return principal.user


@router.get("/users", response_model=list[UserRead])
def list_users(_: Admin, db: SessionDep) -> list[User]:
    return service.list_users(db)


@router.post("/users", response_model=UserRead, status_code=201)
def create_user(body: UserCreate, principal: Admin, request: Request, db: SessionDep, response: Response) -> User:
    user = service.create_user(
        db,
        app_state(request).hasher,
        actor=principal.actor,
        username=body.username,
        password=body.password,
        role=body.role,
        display_name=body.display_name,
    )
    set_etag(response, "user", user.id, user.version)
    return user


@router.patch("/users/{user_id}", response_model=UserRead)
def update_user(
    user_id: int, body: UserUpdate, principal: Admin, request: Request, db: SessionDep, response: Response
) -> User:
    user = db.get(User, user_id)
    if user is None:
        raise NotFound(f"no user with id {user_id}")
    require_if_match(request, "user", user.id, user.version)
    service.update_user(
        db, user, actor=principal.actor, role=body.role, is_active=body.is_active, display_name=body.display_name
    )
    set_etag(response, "user", user.id, user.version)
    return user


@router.get("/tokens", response_model=list[TokenRead])
def list_tokens(principal: CurrentPrincipal, db: SessionDep) -> list[ApiToken]:
    return service.list_api_tokens(db, principal.user)


@router.post("/tokens", response_model=TokenCreated, status_code=201)
def create_token(body: TokenCreate, principal: CurrentPrincipal, db: SessionDep) -> TokenCreated:
    raw, token = service.create_api_token(db, principal.user, name=body.name, actor=principal.actor)
    return TokenCreated(**TokenRead.model_validate(token).model_dump(), token=raw)


@router.delete("/tokens/{token_id}", status_code=204)
def revoke_token(token_id: int, principal: CurrentPrincipal, db: SessionDep) -> Response:
    token = db.get(ApiToken, token_id)
    if token is None or token.user_id != principal.user.id:
        raise NotFound(f"no token with id {token_id} of yours")
    service.revoke_api_token(db, token, actor=principal.actor)
    return Response(status_code=204)
