"""Batch runs: whole-collection automatic digitization, with a score and a decision per sheet.

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-02
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0006"
down_revision: str | None = "0005"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "batch_runs",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("collection_id", sa.Integer(), nullable=False),
        sa.Column("chart_spec_id", sa.Integer(), nullable=False),
        sa.Column("settings", sa.Text(), nullable=False),
        sa.Column("status", sa.String(length=20), nullable=False),
        sa.Column("job_id", sa.Integer(), nullable=True),
        sa.Column("created_by_id", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("finished_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(
            ["chart_spec_id"], ["chart_specs.id"], name=op.f("fk_batch_runs_chart_spec_id_chart_specs")
        ),
        sa.ForeignKeyConstraint(
            ["collection_id"], ["collections.id"], name=op.f("fk_batch_runs_collection_id_collections")
        ),
        sa.ForeignKeyConstraint(["created_by_id"], ["users.id"], name=op.f("fk_batch_runs_created_by_id_users")),
        sa.ForeignKeyConstraint(["job_id"], ["jobs.id"], name=op.f("fk_batch_runs_job_id_jobs")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_batch_runs")),
    )
    with op.batch_alter_table("batch_runs", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_batch_runs_collection_id"), ["collection_id"], unique=False)
    op.create_table(
        "batch_run_items",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("run_id", sa.Integer(), nullable=False),
        sa.Column("sheet_id", sa.Integer(), nullable=False),
        sa.Column("status", sa.String(length=20), nullable=False),
        sa.Column("score", sa.Text(), nullable=False),
        sa.Column("reason", sa.Text(), nullable=False),
        sa.Column("finished_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["run_id"], ["batch_runs.id"], name=op.f("fk_batch_run_items_run_id_batch_runs")),
        sa.ForeignKeyConstraint(["sheet_id"], ["sheets.id"], name=op.f("fk_batch_run_items_sheet_id_sheets")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_batch_run_items")),
        sa.UniqueConstraint("run_id", "sheet_id", name="uq_batch_run_items_run_sheet"),
    )
    with op.batch_alter_table("batch_run_items", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_batch_run_items_run_id"), ["run_id"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("batch_run_items", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_batch_run_items_run_id"))
    op.drop_table("batch_run_items")
    with op.batch_alter_table("batch_runs", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_batch_runs_collection_id"))
    op.drop_table("batch_runs")
