"""The migrations build exactly the schema the models describe (on SQLite and PostgreSQL), and go down again."""

from __future__ import annotations

from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext

from tracedesk.migrate import alembic_config
from tracedesk.models import Base
from tracedesk.web.state import AppState


def test_models_and_migrations_agree(state: AppState) -> None:
    with state.engine.connect() as connection:
        differences = compare_metadata(MigrationContext.configure(connection), Base.metadata)
    assert differences == []


def test_downgrade_to_base_and_up_again(state: AppState) -> None:
    config = alembic_config()
    with state.engine.begin() as connection:
        config.attributes["connection"] = connection
        command.downgrade(config, "base")
        command.upgrade(config, "head")
