"""Request dependencies: one database transaction per request, the current principal, CSRF, permissions."""

from __future__ import annotations

import hmac
from collections.abc import AsyncIterator, Callable, Coroutine
from dataclasses import dataclass
from typing import Annotated, Any, TypeVar

from fastapi import Depends, Request
from sqlalchemy.exc import DBAPIError
from sqlalchemy.orm import Session, sessionmaker
from starlette.concurrency import run_in_threadpool

from tracedesk.accounts import service as accounts
from tracedesk.accounts.permissions import Permission, role_allows
from tracedesk.audit.service import Actor
from tracedesk.db import SERIALIZATION_RETRIES, acquire_without_a_thread, is_retryable, transaction, writer_gate
from tracedesk.errors import Forbidden, NotAuthenticated
from tracedesk.models import User, WebSession
from tracedesk.web.state import app_state

SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})
SESSION_COOKIE = "tracedesk_session"
CSRF_HEADER = "x-csrf-token"
CSRF_FIELD = "csrf_token"
W = TypeVar("W")
R = TypeVar("R")


async def get_db(request: Request) -> AsyncIterator[Session]:
    """The request's only unit of work: committed when the handler returns, rolled back on any error.

    Requests that may write take the SQLite write lock at BEGIN (see ``db.writer_engine``); within one process
    they first queue on the writer lock, waiting in the event loop rather than in a worker thread.
    """
    state = app_state(request)
    factory = state.reader if request.method in SAFE_METHODS else state.writer
    gate = writer_gate(factory)
    if gate is not None:
        await acquire_without_a_thread(gate)
    try:
        session = factory()
        try:
            yield session
            await run_in_threadpool(session.commit)
        except BaseException:
            await run_in_threadpool(session.rollback)
            raise
        finally:
            await run_in_threadpool(session.close)
    finally:
        if gate is not None:
            gate.release()


def _unit_of_work(factory: sessionmaker[Session], work: Callable[[Session], W]) -> W:
    """Run ``work`` in one transaction of ``factory`` (the caller holds any writer lock): commit or roll back."""
    session = factory()
    try:
        result = work(session)
        session.commit()
        return result
    except BaseException:
        session.rollback()
        raise
    finally:
        session.close()


async def write_then_read(request: Request, write: Callable[[Session], W], read: Callable[[Session, W], R]) -> R:
    """Commit ``write`` in a short transaction of its own, then build the answer with ``read`` in a read one.

    Hot edits (autosaves) use this instead of ``SessionDep``: the SQLite writer lock and the PostgreSQL audit
    chain head are held only while the change itself is made, not while the answer's derived numbers (samples,
    uncertainties) are computed and serialised. A serialization failure or deadlock reported by the database
    runs ``write`` again from scratch (up to ``SERIALIZATION_RETRIES`` times); its effects are all or nothing.
    """
    state = app_state(request)
    gate = writer_gate(state.writer)
    for attempt in range(SERIALIZATION_RETRIES):
        if gate is not None:
            await acquire_without_a_thread(gate)
        try:
            written = await run_in_threadpool(_unit_of_work, state.writer, write)
            break
        except DBAPIError as error:
            if attempt + 1 == SERIALIZATION_RETRIES or not is_retryable(error):
                raise
        finally:
            if gate is not None:
                gate.release()
    return await run_in_threadpool(_unit_of_work, state.reader, lambda session: read(session, written))


SessionDep = Annotated[Session, Depends(get_db, scope="function")]


@dataclass(frozen=True)
class Principal:
    """The authenticated user of this request and how they proved it."""

    user: User
    web_session: WebSession | None

    @property
    def actor(self) -> Actor:
        return accounts.actor_of(self.user)

    def can(self, permission: Permission) -> bool:
        return role_allows(self.user.role, permission)

    def require(self, permission: Permission) -> None:
        if not self.can(permission):
            raise Forbidden(f"your role ({self.user.role}) may not do this ({permission.value})")


def client_address(request: Request) -> str:
    return request.client.host if request.client else "unknown"


def _bearer_token(request: Request) -> str | None:
    header = request.headers.get("authorization", "")
    scheme, _, value = header.partition(" ")
    return value.strip() if scheme.lower() == "bearer" and value.strip() else None


async def _submitted_csrf_token(request: Request) -> str:
    token = request.headers.get(CSRF_HEADER)
    if token:
        return token
    content_type = request.headers.get("content-type", "")
    if content_type.startswith("application/x-www-form-urlencoded"):
        form = await request.form()  # Starlette caches the parsed form for the handler
        value = form.get(CSRF_FIELD)
        return value if isinstance(value, str) else ""
    return ""


async def _check_csrf(request: Request, web_session: WebSession) -> None:
    if request.method in SAFE_METHODS:
        return
    submitted = await _submitted_csrf_token(request)
    if not submitted or not hmac.compare_digest(submitted, web_session.csrf_token):
        raise Forbidden("the form or request is missing its CSRF token, or it belongs to another session; reload")


def _lookup(request: Request, cookie: str | None, raw_token: str | None) -> tuple[User, WebSession | None] | None:
    """Resolve credentials in a short read transaction of its own, so the request's write lock is not held yet."""
    state = app_state(request)
    with transaction(state.reader) as session:
        if raw_token is not None:
            found_token = accounts.find_api_token(session, raw_token)
            if found_token is None:
                raise NotAuthenticated("the API token is unknown, revoked or belongs to a disabled account")
            return found_token[1], None
        if not cookie:
            return None
        live = accounts.find_web_session(session, state.settings, cookie)
        if live is None:
            return None
        return live[1], live[0]


def _touch_if_stale(request: Request, web_session: WebSession) -> None:
    """Record activity (for the idle timeout) in a one-statement transaction of its own.

    It bypasses the in-process writer queue on purpose: the request may already hold its place in that queue
    (its own database work has not started yet, so SQLite's lock is free or briefly held by another writer).
    """
    if accounts.session_needs_touch(web_session):
        with Session(app_state(request).engine) as session, session.begin():
            accounts.touch_web_session(session, web_session.id)


async def optional_principal(request: Request) -> Principal | None:
    """The caller, from an API token or a session cookie (with its CSRF check on unsafe methods)."""
    found = await run_in_threadpool(_lookup, request, request.cookies.get(SESSION_COOKIE), _bearer_token(request))
    if found is None:
        return None
    user, web_session = found
    if web_session is not None:
        await _check_csrf(request, web_session)
        await run_in_threadpool(_touch_if_stale, request, web_session)
    return Principal(user=user, web_session=web_session)


async def current_principal(principal: Annotated[Principal | None, Depends(optional_principal)]) -> Principal:
    if principal is None:
        raise NotAuthenticated("log in first (or send an API token as 'Authorization: Bearer ...')")
    return principal


CurrentPrincipal = Annotated[Principal, Depends(current_principal)]
OptionalPrincipal = Annotated[Principal | None, Depends(optional_principal)]


def requires(permission: Permission) -> Callable[[Principal], Coroutine[Any, Any, Principal]]:
    """A dependency that passes the principal on only when their role allows ``permission``."""

    async def dependency(principal: CurrentPrincipal) -> Principal:
        principal.require(permission)
        return principal

    return dependency
