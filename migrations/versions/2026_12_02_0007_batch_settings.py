"""Batch settings of a collection: the thresholds and the fitted model its batch runs use unless a run overrides them.

Revision ID: 0007_batch_settings
Revises: 0006
Create Date: 2026-12-02
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0007_batch_settings"
down_revision: str | None = "0006"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    with op.batch_alter_table("collection_workflows", schema=None) as batch_op:
        batch_op.add_column(sa.Column("batch_settings", sa.Text(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("collection_workflows", schema=None) as batch_op:
        batch_op.drop_column("batch_settings")
