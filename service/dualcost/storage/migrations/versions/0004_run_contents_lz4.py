"""PostgreSQL: a run's input and answer compressed with LZ4, not PostgreSQL's own pglz.

A stored input or answer (27 kB and 130 kB for the 300-item comparison) is larger than a
PostgreSQL page, so PostgreSQL moves it out of the row into the table's TOAST storage,
compressing it first; with its default method (pglz) that compression was most of the cost of
saving a run with a new input: about 2.7 ms of the server's time per stored content here,
against 0.9 ms with LZ4 (PostgreSQL 14 and later, where the server is built with it, as
Debian's is), whose result is about 14 % larger (46 kB against 40 kB for these contents,
82 kB uncompressed). A server without LZ4 (older, or built without it) stores the contents
uncompressed instead (``STORAGE EXTERNAL``), as fast as LZ4 and twice the size. Either
setting applies to contents written from now on; those already stored stay as they are, and
every one reads the same. SQLite and the other databases: nothing to change.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None


def lz4_offered(bind: sa.engine.Connection) -> bool:
    """Whether the PostgreSQL server can compress with LZ4 (one of the values its setting
    ``default_toast_compression`` accepts; the setting exists from version 14)."""
    offered = bind.execute(sa.text(
        "SELECT 'lz4' = ANY(enumvals) FROM pg_settings "
        "WHERE name = 'default_toast_compression'")).scalar()
    return bool(offered)


def upgrade() -> None:
    bind = op.get_bind()
    if bind.dialect.name != "postgresql":
        return
    if lz4_offered(bind):
        op.execute("ALTER TABLE run_contents ALTER COLUMN data SET COMPRESSION lz4")
    else:
        op.execute("ALTER TABLE run_contents ALTER COLUMN data SET STORAGE EXTERNAL")


def downgrade() -> None:
    bind = op.get_bind()
    if bind.dialect.name != "postgresql":
        return
    if lz4_offered(bind):
        op.execute("ALTER TABLE run_contents ALTER COLUMN data SET COMPRESSION DEFAULT")
    op.execute("ALTER TABLE run_contents ALTER COLUMN data SET STORAGE EXTENDED")
