"""Account use cases: users, login with throttling, browser sessions and API tokens. Never commits."""

from __future__ import annotations

import hashlib
import re
import secrets
from dataclasses import dataclass
from datetime import datetime, timedelta

from argon2 import PasswordHasher
from sqlalchemy import func, select, update
from sqlalchemy.orm import InstrumentedAttribute, Session

from tracedesk.accounts.passwords import check_password_policy, verify_password
from tracedesk.audit.service import Actor, created_fields, field_changes, record_event
from tracedesk.config import Settings
from tracedesk.errors import Conflict, NotFound, Unprocessable
from tracedesk.models import ApiToken, LoginAttempt, User, WebSession
from tracedesk.models.base import utcnow
from tracedesk.models.user import ROLES

USERNAME_PATTERN = re.compile(r"^[a-z0-9][a-z0-9._-]{1,63}$")
TOKEN_PREFIX = "tdk_"  # noqa: S105 - a visible prefix, not a secret
LAST_SEEN_RESOLUTION = timedelta(seconds=60)


def token_digest(raw: str) -> str:
    """Tokens are 256-bit random values, so a plain SHA-256 is a safe way to store them (not passwords)."""
    return hashlib.sha256(raw.encode("utf-8")).hexdigest()


def actor_of(user: User) -> Actor:
    return Actor(id=user.id, name=user.display_name)


def _check_new_user(session: Session, username: str, role: str) -> None:
    if not USERNAME_PATTERN.match(username):
        raise Unprocessable("user names are 2-64 characters: lower-case letters, digits, '.', '_' or '-'")
    if role not in ROLES:
        raise Unprocessable(f"unknown role {role!r}; choose one of {', '.join(ROLES)}")
    if session.scalar(select(User.id).where(User.username == username)) is not None:
        raise Conflict(f"the user name {username!r} is taken")


def create_user(
    session: Session,
    hasher: PasswordHasher,
    *,
    actor: Actor,
    username: str,
    password: str,
    role: str,
    display_name: str = "",
) -> User:
    username = username.strip().lower()
    _check_new_user(session, username, role)
    check_password_policy(password, username=username)
    user = User(
        username=username,
        display_name=display_name.strip() or username,
        role=role,
        password_hash=hasher.hash(password),
        is_active=True,
    )
    session.add(user)
    session.flush()
    values = {"username": user.username, "display_name": user.display_name, "role": role, "is_active": True}
    record_event(
        session,
        actor=actor,
        action="create",
        entity_type="user",
        entity_id=user.id,
        entity_version=user.version,
        changes=created_fields(values),
    )
    return user


def get_user_by_name(session: Session, username: str) -> User:
    user = session.scalar(select(User).where(User.username == username.strip().lower()))
    if user is None:
        raise NotFound(f"no user named {username!r}")
    return user


def list_users(session: Session) -> list[User]:
    return list(session.scalars(select(User).order_by(User.username)))


def update_user(
    session: Session,
    user: User,
    *,
    actor: Actor,
    role: str | None = None,
    is_active: bool | None = None,
    display_name: str | None = None,
) -> User:
    """Change role, display name or active flag; disabling (or a role change) ends sessions and tokens."""
    before = {"role": user.role, "is_active": user.is_active, "display_name": user.display_name}
    if role is not None:
        if role not in ROLES:
            raise Unprocessable(f"unknown role {role!r}; choose one of {', '.join(ROLES)}")
        user.role = role
    if is_active is not None:
        user.is_active = is_active
    if display_name is not None and display_name.strip():
        user.display_name = display_name.strip()
    after = {"role": user.role, "is_active": user.is_active, "display_name": user.display_name}
    changes = field_changes(before, after)
    if not changes:
        return user
    user.version += 1
    if "role" in changes or not user.is_active:
        revoke_all_credentials(session, user.id)
    record_event(
        session,
        actor=actor,
        action="update",
        entity_type="user",
        entity_id=user.id,
        entity_version=user.version,
        changes=changes,
    )
    return user


def revoke_all_credentials(session: Session, user_id: int) -> None:
    now = utcnow()
    session.execute(
        update(WebSession).where(WebSession.user_id == user_id, WebSession.revoked_at.is_(None)).values(revoked_at=now)
    )
    session.execute(
        update(ApiToken).where(ApiToken.user_id == user_id, ApiToken.revoked_at.is_(None)).values(revoked_at=now)
    )


@dataclass(frozen=True)
class LoginOutcome:
    user: User | None
    throttled: bool


def _recent_failures(session: Session, column: InstrumentedAttribute[str], value: str, since: datetime) -> int:
    query = (
        select(func.count())
        .select_from(LoginAttempt)
        .where(column == value, LoginAttempt.at >= since, LoginAttempt.succeeded.is_(False))
    )
    return int(session.scalar(query) or 0)


def login_throttled(session: Session, settings: Settings, *, username: str, address: str) -> bool:
    since = utcnow() - timedelta(seconds=settings.login_window_seconds)
    by_account = _recent_failures(session, LoginAttempt.username, username, since)
    by_address = _recent_failures(session, LoginAttempt.address, address, since)
    return (
        by_account >= settings.login_max_failures_per_account or by_address >= settings.login_max_failures_per_address
    )


def authenticate(
    session: Session,
    settings: Settings,
    hasher: PasswordHasher,
    *,
    username: str,
    password: str,
    address: str,
) -> LoginOutcome:
    """Check a login; records the attempt. Unknown and known users get the same answer and cost."""
    username = username.strip().lower()[:64]
    if login_throttled(session, settings, username=username, address=address):
        session.add(LoginAttempt(username=username, address=address, succeeded=False))
        return LoginOutcome(user=None, throttled=True)
    user = session.scalar(select(User).where(User.username == username))
    ok = verify_password(hasher, user.password_hash if user else None, password)
    ok = ok and user is not None and user.is_active
    session.add(LoginAttempt(username=username, address=address, succeeded=ok))
    if not ok or user is None:
        return LoginOutcome(user=None, throttled=False)
    if hasher.check_needs_rehash(user.password_hash):
        user.password_hash = hasher.hash(password)
    return LoginOutcome(user=user, throttled=False)


def confirm_password(hasher: PasswordHasher, user: User, password: str) -> bool:
    """Re-entry of the password for a signature."""
    return verify_password(hasher, user.password_hash, password)


def start_web_session(session: Session, user: User, *, address: str) -> tuple[str, WebSession]:
    """A new random session id (256 bits) and CSRF token; the id itself is returned once, for the cookie."""
    raw = secrets.token_urlsafe(32)
    web_session = WebSession(
        token_hash=token_digest(raw),
        csrf_token=secrets.token_urlsafe(32),
        user_id=user.id,
        address=address[:64],
    )
    session.add(web_session)
    record_event(session, actor=actor_of(user), action="login", entity_type="user", entity_id=user.id)
    session.flush()
    return raw, web_session


def find_web_session(session: Session, settings: Settings, raw: str) -> tuple[WebSession, User] | None:
    """The live session for a cookie value, or None when unknown, revoked, idle too long or too old."""
    row = session.execute(
        select(WebSession, User)
        .join(User, User.id == WebSession.user_id)
        .where(WebSession.token_hash == token_digest(raw))
    ).first()
    if row is None:
        return None
    web_session, user = row
    now = utcnow()
    if web_session.revoked_at is not None or not user.is_active:
        return None
    if now - web_session.last_seen_at > timedelta(seconds=settings.session_idle_timeout):
        return None
    if now - web_session.created_at > timedelta(seconds=settings.session_absolute_timeout):
        return None
    return web_session, user


def session_needs_touch(web_session: WebSession) -> bool:
    return utcnow() - web_session.last_seen_at > LAST_SEEN_RESOLUTION


def touch_web_session(session: Session, session_id: int) -> None:
    session.execute(update(WebSession).where(WebSession.id == session_id).values(last_seen_at=utcnow()))


def end_web_session(session: Session, web_session: WebSession, user: User) -> None:
    session.execute(update(WebSession).where(WebSession.id == web_session.id).values(revoked_at=utcnow()))
    record_event(session, actor=actor_of(user), action="logout", entity_type="user", entity_id=user.id)


def create_api_token(session: Session, user: User, *, name: str, actor: Actor) -> tuple[str, ApiToken]:
    """A new API token for ``user``; the raw token is returned once and never stored."""
    name = name.strip()
    if not name or len(name) > 100:
        raise Unprocessable("a token needs a name of 1-100 characters")
    raw = TOKEN_PREFIX + secrets.token_urlsafe(32)
    token = ApiToken(user_id=user.id, name=name, token_hash=token_digest(raw), prefix=raw[:10])
    session.add(token)
    session.flush()
    record_event(
        session,
        actor=actor,
        action="create",
        entity_type="api_token",
        entity_id=token.id,
        changes=created_fields({"name": name, "user": user.username, "prefix": token.prefix}),
    )
    return raw, token


def find_api_token(session: Session, raw: str) -> tuple[ApiToken, User] | None:
    if not raw.startswith(TOKEN_PREFIX):
        return None
    row = session.execute(
        select(ApiToken, User).join(User, User.id == ApiToken.user_id).where(ApiToken.token_hash == token_digest(raw))
    ).first()
    if row is None:
        return None
    token, user = row
    if token.revoked_at is not None or not user.is_active:
        return None
    return token, user


def revoke_api_token(session: Session, token: ApiToken, *, actor: Actor) -> None:
    token.revoked_at = utcnow()
    record_event(session, actor=actor, action="revoke", entity_type="api_token", entity_id=token.id)


def list_api_tokens(session: Session, user: User) -> list[ApiToken]:
    return list(session.scalars(select(ApiToken).where(ApiToken.user_id == user.id).order_by(ApiToken.id)))
