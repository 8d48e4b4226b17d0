"""Bring a database to the newest schema by running the Alembic migrations in migrations/."""

from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config
from sqlalchemy import Engine, inspect

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
