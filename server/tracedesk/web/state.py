"""What the app keeps for its lifetime (built in ``create_app``), reachable from any request."""

from __future__ import annotations

from dataclasses import dataclass, field

from argon2 import PasswordHasher
from fastapi import Request
from fastapi.templating import Jinja2Templates
from sqlalchemy import Engine
from sqlalchemy.orm import Session, sessionmaker

from tracedesk.config import Settings
from tracedesk.jobs.protocol import JobDispatcher
from tracedesk.storage import FileStore


@dataclass
class AppState:
    settings: Settings
    engine: Engine
    reader: sessionmaker[Session]
    writer: sessionmaker[Session]
    hasher: PasswordHasher
    store: FileStore
    templates: Jinja2Templates
    dispatcher: JobDispatcher = field(init=False)


def app_state(request: Request) -> AppState:
    state: AppState = request.app.state.tracedesk
    return state
