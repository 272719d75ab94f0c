"""The database of household jobs and saved runs: SQLAlchemy 2, migrated by Alembic at start-up.

SQLite by default, a file ``dualcost.sqlite3`` in the data directory (created on first start);
PostgreSQL (or any database SQLAlchemy speaks) by ``DUALCOST_DATABASE_URL``. Nothing here knows
which: the tables, the queries and the migrations are SQLAlchemy's and Alembic's, the same for
every database.

Every change is one transaction (:meth:`Database.transaction`): committed whole or not at all.
A database that cannot be reached, or refuses the statement (a lost connection, a locked file,
a missing table), raises :class:`~dualcost.core.errors.StorageUnavailable` after the rollback;
the web layer answers 503 with Retry-After. ``/ready`` reads :attr:`Database.healthy`, which
a probe (a read of its smallest table) sets after such a failure, and each keeper round sets:
false while the database cannot be reached, true again once it can (a database that is only
busy stays healthy).

SQLite is opened in write-ahead-log mode with ``synchronous=NORMAL`` and its foreign keys
enforced (:func:`_sqlite_pragmas`): a commit is not flushed to the disk each time, only at
checkpoints, so a committed change survives a crash of the process but the last ones may be
lost to a power failure or a crash of the operating system (the database stays consistent).
PostgreSQL keeps its own settings (``synchronous_commit``), but for the transactions opened
with ``durable=False`` (the saved runs' writer): those are committed with
``synchronous_commit=off``, the same trade as SQLite's: a crash of the server (not only of the
operating system) may lose the last of them, a fraction of a second's worth, but never half of
one, and the database stays consistent.
"""

from __future__ import annotations

import threading
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine, create_engine, event, select, text
from sqlalchemy.exc import DBAPIError, InterfaceError, OperationalError
from sqlalchemy.exc import TimeoutError as PoolTimeout
from sqlalchemy.orm import Session, sessionmaker

from ..config import Settings
from ..core.errors import StorageUnavailable

MIGRATIONS = Path(__file__).resolve().parent / "migrations"
#: What a lost or unusable database raises inside SQLAlchemy.
_UNAVAILABLE = (OperationalError, InterfaceError, PoolTimeout)

__all__ = ["Database", "StorageUnavailable", "database_of", "describe_url", "forget"]


def describe_url(url: str) -> str:
    """The URL as it may be printed: without its password."""
    from sqlalchemy.engine import make_url

    try:
        return make_url(url).render_as_string(hide_password=True)
    except Exception:  # an unreadable URL is printed as given, less what follows '@'
        return url.split("@")[-1]


def _alembic_config(connection: object) -> Config:
    config = Config()
    config.set_main_option("script_location", str(MIGRATIONS))
    config.attributes["connection"] = connection
    return config


class Database:
    """One database: its engine, its sessions, whether it answered last time it was asked."""

    def __init__(self, url: str) -> None:
        self.url = url
        self.engine: Engine = create_engine(url, pool_pre_ping=True)
        if self.engine.dialect.name == "sqlite":
            event.listen(self.engine, "connect", _sqlite_pragmas)
        self.sessions = sessionmaker(self.engine, expire_on_commit=False)
        self.healthy = True
        self._migrated = False
        self._lock = threading.Lock()

    def migrate(self) -> None:
        """Bring the schema to the newest migration (nothing to do when it is there)."""
        with self._lock:
            if self._migrated:
                return
            config = _alembic_config(None)
            heads = set(ScriptDirectory.from_config(config).get_heads())
            with self.engine.begin() as connection:
                current = set(MigrationContext.configure(connection).get_current_heads())
                if current != heads:
                    config.attributes["connection"] = connection
                    command.upgrade(config, "head")
            self._migrated = True

    @contextmanager
    def transaction(self, *, durable: bool = True) -> Iterator[Session]:
        """A session in one transaction, committed at the end, rolled back on any error; a
        database out of reach becomes :class:`StorageUnavailable`. Not ``durable``: on
        PostgreSQL the commit does not wait for the server to flush its log to the disk
        (``SET LOCAL synchronous_commit = off``, this transaction only; see the module's
        notes); elsewhere the same as durable."""
        try:
            with self.sessions.begin() as session:
                if not durable and self.engine.dialect.name == "postgresql":
                    session.execute(text("SET LOCAL synchronous_commit = off"))
                yield session
        except _UNAVAILABLE as exc:
            # A busy database (a locked SQLite file) is not a lost one: /ready follows a probe.
            self.ping()
            raise StorageUnavailable(_reason(exc)) from None
        except DBAPIError as exc:
            if exc.connection_invalidated:
                self.ping()
                raise StorageUnavailable(_reason(exc)) from None
            raise
        self.healthy = True

    def ping(self) -> bool:
        """Whether the database answers now, with its tables (and remember it)."""
        from .tables import JobTable

        try:
            with self.engine.connect() as connection:
                connection.execute(select(JobTable.id).limit(1))
        except (DBAPIError, PoolTimeout):
            self.healthy = False
        else:
            self.healthy = True
        return self.healthy


def _sqlite_pragmas(connection: Any, _record: object) -> None:
    """Each new SQLite connection: the write-ahead log, with a flush to the disk at each
    checkpoint rather than at each commit (committed runs survive a crash of the process; a
    power failure may lose the last ones), readers never waiting for the writer, and foreign
    keys enforced (SQLite leaves them off unless asked)."""
    cursor = connection.cursor()
    try:
        cursor.execute("PRAGMA journal_mode=WAL")
        cursor.execute("PRAGMA synchronous=NORMAL")
        cursor.execute("PRAGMA foreign_keys=ON")
    finally:
        cursor.close()


def _reason(exc: Exception) -> str:
    """The driver's own message, first line, without SQLAlchemy's links and statement."""
    original = getattr(exc, "orig", None) or exc
    first = str(original).strip().splitlines()
    return f"the database cannot be used: {first[0] if first else type(original).__name__}"


_OPEN: dict[str, Database] = {}
_OPEN_LOCK = threading.Lock()


def database_of(settings: Settings) -> Database:
    """The settings' database, opened once per process and migrated (the data directory is
    created first when the database is the embedded one). Raises StorageUnavailable, naming
    the database and the reason, when it cannot be opened or migrated."""
    url = settings.database()
    with _OPEN_LOCK:
        db = _OPEN.get(url)
        if db is None:
            try:
                if settings.database_url is None:
                    settings.data_dir.mkdir(parents=True, exist_ok=True)
                db = Database(url)
            except Exception as exc:
                raise StorageUnavailable(f"cannot open the database {describe_url(url)}: "
                                         f"{type(exc).__name__}: {exc}") from None
            _OPEN[url] = db
    try:
        db.migrate()
    except Exception as exc:
        lines = str(getattr(exc, "orig", None) or exc).strip().splitlines()
        raise StorageUnavailable(f"cannot open the database {describe_url(url)}: "
                                 f"{lines[0] if lines else type(exc).__name__}") from None
    return db


def forget(url: str) -> None:
    """Close the database opened at ``url`` in this process (its pooled connections)."""
    with _OPEN_LOCK:
        db = _OPEN.pop(url, None)
    if db is not None:
        db.engine.dispose()
