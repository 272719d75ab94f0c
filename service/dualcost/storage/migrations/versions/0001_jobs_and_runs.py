"""Household jobs, their results, and saved runs.

Revision ID: 0001
Revises:
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    job_table = op.create_table(
        "job_table",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("generation", sa.Integer, nullable=False),
    )
    op.bulk_insert(job_table, [{"id": 1, "generation": 0}])
    op.create_table(
        "household_jobs",
        sa.Column("serial", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("id", sa.String(32), nullable=False),
        sa.Column("owner", sa.String(64)),
        sa.Column("status", sa.String(32), nullable=False),
        sa.Column("error", sa.Text),
        sa.Column("uploads", sa.Integer, nullable=False),
        sa.Column("created", sa.DateTime, nullable=False),
        sa.Column("updated", sa.DateTime, nullable=False),
        sa.Column("spec", sa.Text, nullable=False),
        sa.Column("document", sa.Text, nullable=False),
        sa.Column("input_digest", sa.String(80), nullable=False),
        sa.Column("runner", sa.String(120)),
        sa.Column("heartbeat", sa.DateTime),
    )
    op.create_index("ix_household_jobs_id", "household_jobs", ["id"], unique=True)
    op.create_index("ix_household_jobs_owner", "household_jobs", ["owner"])
    op.create_table(
        "household_job_results",
        sa.Column("job_id", sa.String(32), primary_key=True),
        sa.Column("piece", sa.Integer, primary_key=True),
        sa.Column("text", sa.Text, nullable=False),
    )
    op.create_table(
        "runs",
        sa.Column("serial", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("id", sa.String(32), nullable=False),
        sa.Column("owner", sa.String(64)),
        sa.Column("operation", sa.String(120), nullable=False),
        sa.Column("created", sa.DateTime, nullable=False),
        sa.Column("version", sa.String(64), nullable=False),
        sa.Column("input_digest", sa.String(80), nullable=False),
        sa.Column("input", sa.Text, nullable=False),
        sa.Column("method", sa.String(10), nullable=False),
        sa.Column("path", sa.Text, nullable=False),
        sa.Column("query", sa.Text, nullable=False),
        sa.Column("content_type", sa.String(200)),
        sa.Column("accept", sa.Text),
        sa.Column("request_body", sa.LargeBinary, nullable=False),
        sa.Column("status_code", sa.Integer, nullable=False),
        sa.Column("answer_type", sa.String(200), nullable=False),
        sa.Column("answer", sa.LargeBinary, nullable=False),
    )
    op.create_index("ix_runs_id", "runs", ["id"], unique=True)
    op.create_index("ix_runs_owner", "runs", ["owner"])
    op.create_index("ix_runs_operation", "runs", ["operation"])
    op.create_index("ix_runs_created", "runs", ["created"])
    op.create_index("ix_runs_input_digest", "runs", ["input_digest"])


def downgrade() -> None:
    op.drop_table("runs")
    op.drop_table("household_job_results")
    op.drop_table("household_jobs")
    op.drop_table("job_table")
