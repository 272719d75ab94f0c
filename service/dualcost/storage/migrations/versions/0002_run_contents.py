"""A run's input and answer kept once per distinct content (table run_contents).

The runs of revision 0001 are moved: each input and answer becomes a row of ``run_contents``
under ``sha256:`` and the SHA-256 of its bytes (once, however many runs share it), the run
names it, and the columns that held it go.

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02
"""

from __future__ import annotations

import hashlib

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None

#: Runs moved per statement.
CHUNK = 200


def _digest(data: bytes) -> str:
    return "sha256:" + hashlib.sha256(data).hexdigest()


def upgrade() -> None:
    contents = op.create_table(
        "run_contents",
        sa.Column("digest", sa.String(80), primary_key=True),
        sa.Column("data", sa.LargeBinary, nullable=False),
    )
    with op.batch_alter_table("runs") as batch:
        batch.add_column(sa.Column("input_ref", sa.String(80)))
        batch.add_column(sa.Column("answer_ref", sa.String(80)))
    _move_contents(contents)
    with op.batch_alter_table("runs") as batch:
        batch.drop_column("input")
        batch.drop_column("answer")
        batch.alter_column("input_ref", existing_type=sa.String(80), nullable=False)
        batch.alter_column("answer_ref", existing_type=sa.String(80), nullable=False)
        batch.create_foreign_key("fk_runs_input_ref", "run_contents", ["input_ref"], ["digest"])
        batch.create_foreign_key("fk_runs_answer_ref", "run_contents", ["answer_ref"],
                                 ["digest"])
        batch.create_index("ix_runs_input_ref", ["input_ref"])
        batch.create_index("ix_runs_answer_ref", ["answer_ref"])


def _move_contents(contents: sa.Table) -> None:
    """Each run's input and answer into run_contents, chunk by chunk, once each."""
    bind = op.get_bind()
    runs = sa.table("runs", sa.column("serial", sa.Integer), sa.column("input", sa.Text),
                    sa.column("answer", sa.LargeBinary), sa.column("input_ref", sa.String),
                    sa.column("answer_ref", sa.String))
    known: set[str] = set()
    last = -1
    while True:
        chunk = bind.execute(sa.select(runs.c.serial, runs.c.input, runs.c.answer)
                             .where(runs.c.serial > last).order_by(runs.c.serial)
                             .limit(CHUNK)).all()
        if not chunk:
            return
        for serial, text, answer in chunk:
            refs = {}
            for name, data in (("input_ref", text.encode()), ("answer_ref", bytes(answer))):
                refs[name] = _digest(data)
                if refs[name] not in known:
                    bind.execute(sa.insert(contents).values(digest=refs[name], data=data))
                    known.add(refs[name])
            bind.execute(sa.update(runs).where(runs.c.serial == serial).values(**refs))
        last = chunk[-1][0]


def downgrade() -> None:
    with op.batch_alter_table("runs") as batch:
        batch.add_column(sa.Column("input", sa.Text))
        batch.add_column(sa.Column("answer", sa.LargeBinary))
    bind = op.get_bind()
    runs = sa.table("runs", sa.column("input", sa.Text), sa.column("answer", sa.LargeBinary),
                    sa.column("input_ref", sa.String), sa.column("answer_ref", sa.String))
    contents = sa.table("run_contents", sa.column("digest", sa.String),
                        sa.column("data", sa.LargeBinary))
    for digest, data in bind.execute(sa.select(contents.c.digest, contents.c.data)):
        bind.execute(sa.update(runs).where(runs.c.input_ref == digest)
                     .values(input=bytes(data).decode()))
        bind.execute(sa.update(runs).where(runs.c.answer_ref == digest).values(answer=data))
    with op.batch_alter_table("runs") as batch:
        batch.drop_index("ix_runs_input_ref")
        batch.drop_index("ix_runs_answer_ref")
        batch.drop_constraint("fk_runs_input_ref", type_="foreignkey")
        batch.drop_constraint("fk_runs_answer_ref", type_="foreignkey")
        batch.drop_column("input_ref")
        batch.drop_column("answer_ref")
        batch.alter_column("input", existing_type=sa.Text, nullable=False)
        batch.alter_column("answer", existing_type=sa.LargeBinary, nullable=False)
    op.drop_table("run_contents")
