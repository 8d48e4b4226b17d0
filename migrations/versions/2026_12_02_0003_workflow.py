"""Workflow: tasks, signatures, review comments, notices and per-collection workflow settings.

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-02 09:00:00.000000
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0003"
down_revision: str | None = "0002"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def _user_fk(table: str, column: str) -> sa.ForeignKeyConstraint:
    return sa.ForeignKeyConstraint([column], ["users.id"], name=op.f(f"fk_{table}_{column}_users"))


def _create_tasks() -> None:
    op.create_table(
        "tasks",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("sheet_id", sa.Integer(), nullable=False),
        sa.Column("collection_id", sa.Integer(), nullable=False),
        sa.Column("state", sa.String(length=20), nullable=False),
        sa.Column("technician_id", sa.Integer(), nullable=True),
        sa.Column("second_technician_id", sa.Integer(), nullable=True),
        sa.Column("reviewer_id", sa.Integer(), nullable=True),
        sa.Column("priority", sa.String(length=10), nullable=False),
        sa.Column("due_date", sa.Date(), nullable=True),
        sa.Column("double_digitization", sa.Boolean(), nullable=False),
        sa.Column("technician_submitted", sa.Boolean(), nullable=False),
        sa.Column("second_submitted", sa.Boolean(), nullable=False),
        sa.Column("reason", sa.Text(), nullable=True),
        sa.Column("submitted_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("approved_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("created_by_id", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["sheet_id"], ["sheets.id"], name=op.f("fk_tasks_sheet_id_sheets")),
        sa.ForeignKeyConstraint(["collection_id"], ["collections.id"], name=op.f("fk_tasks_collection_id_collections")),
        _user_fk("tasks", "technician_id"),
        _user_fk("tasks", "second_technician_id"),
        _user_fk("tasks", "reviewer_id"),
        _user_fk("tasks", "created_by_id"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_tasks")),
        sa.UniqueConstraint("sheet_id", name=op.f("uq_tasks_sheet_id")),
    )
    with op.batch_alter_table("tasks", schema=None) as batch_op:
        batch_op.create_index("ix_tasks_collection_id_state", ["collection_id", "state"], unique=False)
        batch_op.create_index("ix_tasks_technician_id_state", ["technician_id", "state"], unique=False)
        batch_op.create_index("ix_tasks_second_technician_id", ["second_technician_id"], unique=False)
        batch_op.create_index("ix_tasks_reviewer_id_state", ["reviewer_id", "state"], unique=False)


def _create_signatures() -> None:
    op.create_table(
        "signatures",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("task_id", sa.Integer(), nullable=False),
        sa.Column("sheet_id", sa.Integer(), nullable=False),
        sa.Column("signer_id", sa.Integer(), nullable=False),
        sa.Column("printed_name", sa.String(length=200), nullable=False),
        sa.Column("meaning", sa.String(length=20), nullable=False),
        sa.Column("signed_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("record_sha256", sa.String(length=64), nullable=False),
        sa.Column("record_versions", sa.Text(), nullable=False),
        sa.Column("withdrawn_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("withdrawn_reason", sa.Text(), nullable=True),
        sa.ForeignKeyConstraint(["task_id"], ["tasks.id"], name=op.f("fk_signatures_task_id_tasks")),
        sa.ForeignKeyConstraint(["sheet_id"], ["sheets.id"], name=op.f("fk_signatures_sheet_id_sheets")),
        _user_fk("signatures", "signer_id"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_signatures")),
    )
    with op.batch_alter_table("signatures", schema=None) as batch_op:
        batch_op.create_index("ix_signatures_task_id_id", ["task_id", "id"], unique=False)
        batch_op.create_index(batch_op.f("ix_signatures_sheet_id"), ["sheet_id"], unique=False)


def _create_review_comments() -> None:
    op.create_table(
        "review_comments",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("task_id", sa.Integer(), nullable=False),
        sa.Column("sheet_id", sa.Integer(), nullable=False),
        sa.Column("author_id", sa.Integer(), nullable=False),
        sa.Column("body", sa.Text(), nullable=False),
        sa.Column("u", sa.Float(), nullable=True),
        sa.Column("v", sa.Float(), nullable=True),
        sa.Column("trace_id", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("resolved_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("resolved_by_id", sa.Integer(), nullable=True),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["task_id"], ["tasks.id"], name=op.f("fk_review_comments_task_id_tasks")),
        sa.ForeignKeyConstraint(["sheet_id"], ["sheets.id"], name=op.f("fk_review_comments_sheet_id_sheets")),
        sa.ForeignKeyConstraint(["trace_id"], ["traces.id"], name=op.f("fk_review_comments_trace_id_traces")),
        _user_fk("review_comments", "author_id"),
        _user_fk("review_comments", "resolved_by_id"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_review_comments")),
    )
    with op.batch_alter_table("review_comments", schema=None) as batch_op:
        batch_op.create_index("ix_review_comments_task_id_id", ["task_id", "id"], unique=False)


def _create_notices_and_settings() -> None:
    op.create_table(
        "notices",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("user_id", sa.Integer(), nullable=False),
        sa.Column("kind", sa.String(length=30), nullable=False),
        sa.Column("task_id", sa.Integer(), nullable=True),
        sa.Column("message", sa.Text(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("read_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["task_id"], ["tasks.id"], name=op.f("fk_notices_task_id_tasks")),
        _user_fk("notices", "user_id"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_notices")),
    )
    with op.batch_alter_table("notices", schema=None) as batch_op:
        batch_op.create_index("ix_notices_user_id_id", ["user_id", "id"], unique=False)
    op.create_table(
        "collection_workflows",
        sa.Column("collection_id", sa.Integer(), autoincrement=False, nullable=False),
        sa.Column("double_digitization", sa.Boolean(), nullable=False),
        sa.Column("tolerance", sa.Float(), nullable=True),
        sa.Column("updated_by_id", sa.Integer(), nullable=True),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(
            ["collection_id"], ["collections.id"], name=op.f("fk_collection_workflows_collection_id_collections")
        ),
        _user_fk("collection_workflows", "updated_by_id"),
        sa.PrimaryKeyConstraint("collection_id", name=op.f("pk_collection_workflows")),
    )


def upgrade() -> None:
    _create_tasks()
    _create_signatures()
    _create_review_comments()
    _create_notices_and_settings()


def downgrade() -> None:
    op.drop_table("collection_workflows")
    with op.batch_alter_table("notices", schema=None) as batch_op:
        batch_op.drop_index("ix_notices_user_id_id")
    op.drop_table("notices")
    with op.batch_alter_table("review_comments", schema=None) as batch_op:
        batch_op.drop_index("ix_review_comments_task_id_id")
    op.drop_table("review_comments")
    with op.batch_alter_table("signatures", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_signatures_sheet_id"))
        batch_op.drop_index("ix_signatures_task_id_id")
    op.drop_table("signatures")
    with op.batch_alter_table("tasks", schema=None) as batch_op:
        batch_op.drop_index("ix_tasks_reviewer_id_state")
        batch_op.drop_index("ix_tasks_second_technician_id")
        batch_op.drop_index("ix_tasks_technician_id_state")
        batch_op.drop_index("ix_tasks_collection_id_state")
    op.drop_table("tasks")
