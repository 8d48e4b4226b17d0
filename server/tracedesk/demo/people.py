"""The demo's invented people: an administrator, two technicians and a reviewer, with generated passwords.

Their user names (``demo-...``) are reserved for the demo: loading finds them again instead of adding more,
and removing the demo disables them, because their passwords were printed in a terminal.
"""

from __future__ import annotations

import secrets
from dataclasses import dataclass

from argon2 import PasswordHasher
from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.accounts.service import actor_of, create_user, update_user
from tracedesk.audit.service import Actor, record_event
from tracedesk.models import User


@dataclass(frozen=True)
class DemoPerson:
    """One demo account: the key the scenarios use, user name, role and printed name."""

    key: str
    username: str
    role: str
    display_name: str


DEMO_PEOPLE = (
    DemoPerson("admin", "demo-admin", "admin", "Isolde Varga"),
    DemoPerson("tech_a", "demo-tech1", "technician", "Tobias Renshaw"),
    DemoPerson("tech_b", "demo-tech2", "technician", "Priya Halloran"),
    DemoPerson("reviewer", "demo-reviewer", "reviewer", "Gideon Ashdown"),
)
DEMO_USERNAMES = frozenset(person.username for person in DEMO_PEOPLE)


@dataclass(frozen=True)
class DemoAccount:
    """A demo account as reported once: its password when it was (re)generated now, else None."""

    username: str
    role: str
    display_name: str
    password: str | None


def _new_password() -> str:
    return secrets.token_urlsafe(12)


def _reactivate(session: Session, hasher: PasswordHasher, user: User, *, actor: Actor) -> str:
    """A disabled demo account comes back with a new password (the old one was printed long ago)."""
    password = _new_password()
    user.password_hash = hasher.hash(password)
    update_user(session, user, actor=actor, is_active=True)
    record_event(
        session,
        actor=actor,
        action="reset_password",
        entity_type="user",
        entity_id=user.id,
        entity_version=user.version,
        changes={},
        reason="demo archive loaded again",
    )
    return password


def ensure_demo_people(
    session: Session, hasher: PasswordHasher, *, actor: Actor
) -> tuple[list[DemoAccount], dict[str, Actor]]:
    """Create the demo accounts that are missing; re-enable disabled ones. Returns the report and actors by key."""
    accounts: list[DemoAccount] = []
    actors: dict[str, Actor] = {}
    for person in DEMO_PEOPLE:
        user = session.scalar(select(User).where(User.username == person.username))
        password: str | None = None
        if user is None:
            password = _new_password()
            user = create_user(
                session,
                hasher,
                actor=actor,
                username=person.username,
                password=password,
                role=person.role,
                display_name=person.display_name,
            )
        elif not user.is_active:
            password = _reactivate(session, hasher, user, actor=actor)
        accounts.append(DemoAccount(user.username, user.role, user.display_name, password))
        actors[person.key] = actor_of(user)
    return accounts, actors


def disable_demo_people(session: Session, *, actor: Actor) -> list[str]:
    """Disable every active demo account (ends their sessions and tokens); returns their user names."""
    disabled = []
    for user in session.scalars(select(User).where(User.username.in_(DEMO_USERNAMES), User.is_active.is_(True))):
        update_user(session, user, actor=actor, is_active=False)
        disabled.append(user.username)
    return sorted(disabled)
