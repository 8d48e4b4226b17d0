"""Digitizing: calibrations, traces and fits.

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02 01:09:52.899215
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0002"
down_revision: str | None = "0001"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:

    op.create_table(
        "calibrations",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("sheet_id", sa.Integer(), nullable=False),
        sa.Column("kind", sa.String(length=20), nullable=False),
        sa.Column("spec", sa.Text(), nullable=False),
        sa.Column("report", sa.Text(), nullable=False),
        sa.Column("origin", sa.String(length=20), nullable=False),
        sa.Column("updated_by_id", sa.Integer(), nullable=True),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["sheet_id"], ["sheets.id"], name=op.f("fk_calibrations_sheet_id_sheets")),
        sa.ForeignKeyConstraint(["updated_by_id"], ["users.id"], name=op.f("fk_calibrations_updated_by_id_users")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_calibrations")),
        sa.UniqueConstraint("sheet_id", name=op.f("uq_calibrations_sheet_id")),
    )
    op.create_table(
        "traces",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("sheet_id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=120), nullable=False),
        sa.Column("unit", sa.String(length=60), nullable=False),
        sa.Column("pen_color", sa.String(length=7), nullable=False),
        sa.Column("origin", sa.String(length=20), nullable=False),
        sa.Column("vertices", sa.Text(), nullable=False),
        sa.Column("confidence", sa.Text(), nullable=False),
        sa.Column("gaps", sa.Text(), nullable=False),
        sa.Column("line_width_px", sa.Float(), nullable=False),
        sa.Column("withdrawn_reason", sa.Text(), nullable=True),
        sa.Column("created_by_id", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["created_by_id"], ["users.id"], name=op.f("fk_traces_created_by_id_users")),
        sa.ForeignKeyConstraint(["sheet_id"], ["sheets.id"], name=op.f("fk_traces_sheet_id_sheets")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_traces")),
    )
    with op.batch_alter_table("traces", schema=None) as batch_op:
        batch_op.create_index("ix_traces_sheet_id_id", ["sheet_id", "id"], unique=False)

    op.create_table(
        "fits",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("trace_id", sa.Integer(), nullable=False),
        sa.Column("family", sa.String(length=40), nullable=False),
        sa.Column("options", sa.Text(), nullable=False),
        sa.Column("result", sa.Text(), nullable=False),
        sa.Column("trace_version", sa.Integer(), nullable=False),
        sa.Column("calibration_version", sa.Integer(), nullable=False),
        sa.Column("stale", sa.Boolean(), nullable=False),
        sa.Column("created_by_id", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["created_by_id"], ["users.id"], name=op.f("fk_fits_created_by_id_users")),
        sa.ForeignKeyConstraint(["trace_id"], ["traces.id"], name=op.f("fk_fits_trace_id_traces")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_fits")),
    )
    with op.batch_alter_table("fits", schema=None) as batch_op:
        batch_op.create_index("ix_fits_trace_id_id", ["trace_id", "id"], unique=False)


def downgrade() -> None:

    with op.batch_alter_table("fits", schema=None) as batch_op:
        batch_op.drop_index("ix_fits_trace_id_id")

    op.drop_table("fits")
    with op.batch_alter_table("traces", schema=None) as batch_op:
        batch_op.drop_index("ix_traces_sheet_id_id")

    op.drop_table("traces")
    op.drop_table("calibrations")
