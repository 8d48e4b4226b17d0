"""Chart specs: the printed geometry of a chart and calibration templates, reusable across sheets.

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-02
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0005"
down_revision: str | None = "0004"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "chart_specs",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("collection_id", sa.Integer(), nullable=True),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("kind", sa.String(length=20), nullable=False),
        sa.Column("geometry", sa.Text(), nullable=True),
        sa.Column("calibration_template", sa.Text(), nullable=True),
        sa.Column("notes", sa.Text(), nullable=False),
        sa.Column("created_by_id", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(
            ["collection_id"], ["collections.id"], name=op.f("fk_chart_specs_collection_id_collections")
        ),
        sa.ForeignKeyConstraint(["created_by_id"], ["users.id"], name=op.f("fk_chart_specs_created_by_id_users")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_chart_specs")),
    )
    with op.batch_alter_table("chart_specs", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_chart_specs_collection_id"), ["collection_id"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("chart_specs", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_chart_specs_collection_id"))
    op.drop_table("chart_specs")
