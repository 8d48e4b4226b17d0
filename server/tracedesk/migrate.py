"""Bring a database to the newest schema by running the Alembic migrations in migrations/."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine, inspect
from sqlalchemy.exc import SQLAlchemyError

if TYPE_CHECKING:
    from tracedesk.web.state import AppState

REPO_ROOT = Path(__file__).resolve().parents[2]


def alembic_config() -> Config:
    config = Config(str(REPO_ROOT / "alembic.ini"))
    config.set_main_option("script_location", str(REPO_ROOT / "migrations"))
    return config


def upgrade_database(engine: Engine) -> None:
    """Apply every pending migration on ``engine`` (idempotent)."""
    config = alembic_config()
    with engine.begin() as connection:
        config.attributes["connection"] = connection
        command.upgrade(config, "head")


def database_is_current(engine: Engine) -> bool:
    """True when the schema exists (used by the readiness check and the embedded first run)."""
    return inspect(engine).has_table("alembic_version")


def current_revision(engine: Engine) -> str | None:
    with engine.connect() as connection:
        return MigrationContext.configure(connection).get_current_revision()


def head_revision() -> str | None:
    return ScriptDirectory.from_config(alembic_config()).get_current_head()


def readiness_problems(state: AppState) -> list[str]:
    """What keeps this instance from serving: an old schema, a store that cannot be written."""
    problems = []
    try:
        if current_revision(state.engine) != head_revision():
            problems.append("the database schema is not at the newest migration: run `tracedesk migrate`")
    except SQLAlchemyError as error:
        problems.append(f"the database does not answer: {type(error).__name__}")
    probe = state.settings.data_dir / ".ready-probe"
    try:
        probe.write_bytes(b"ok")
        probe.unlink()
    except OSError as error:
        problems.append(f"the data folder is not writable: {error.strerror}")
    return problems
