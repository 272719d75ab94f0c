"""A household job's results kept as columns (Arrow IPC bytes) rather than CSV text.

Each piece of ``household_job_results`` gains ``data``: for the pieces written from this
revision on, the job's first piece holds what its answer's writers need (JSON) beside the CSV
header, and every other piece one chunk's result columns as an Arrow IPC stream, from which
GET .../results writes CSV or Parquet. ``text`` may now be empty (null). Pieces written
before (CSV text, ``data`` null) are left as they are and still read as CSV.

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("household_job_results") as batch:
        batch.add_column(sa.Column("data", sa.LargeBinary))
        batch.alter_column("text", existing_type=sa.Text, nullable=True)


def downgrade() -> None:
    # The results kept as columns cannot be read by the older code: those jobs' pieces go
    # (their jobs stay, with their summaries), and the pieces kept as CSV stay.
    pieces = sa.table("household_job_results", sa.column("data", sa.LargeBinary),
                      sa.column("job_id", sa.String))
    bind = op.get_bind()
    columnar = sa.select(pieces.c.job_id).where(pieces.c.data.is_not(None)).distinct()
    bind.execute(sa.delete(pieces).where(pieces.c.job_id.in_(columnar)))
    with op.batch_alter_table("household_job_results") as batch:
        batch.drop_column("data")
        batch.alter_column("text", existing_type=sa.Text, nullable=False)
