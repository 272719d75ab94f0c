"""Alembic's environment: migrations run on the connection :mod:`dualcost.storage` hands over
(``config.attributes["connection"]``), never on a URL of their own."""

from __future__ import annotations

from alembic import context

from dualcost.storage.tables import Base

connection = context.config.attributes["connection"]
context.configure(connection=connection, target_metadata=Base.metadata)
with context.begin_transaction():
    context.run_migrations()
