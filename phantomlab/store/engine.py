"""Open the batch log: SQLite file by default, PostgreSQL by URL (layer 4).

``open_store(url)`` picks the database from its argument, else the ``PHANTOMLAB_DB``
environment variable, else ``sqlite:///phantomlab.sqlite`` in the working folder (created on
first use), brings its schema up to date (Alembic, in place) and returns a :class:`Store`.

Every command runs in ONE transaction (:meth:`Store.transaction`): it commits whole or not
at all.  SQLite runs in WAL mode with foreign keys ON; a write transaction starts with
``BEGIN IMMEDIATE``, so a second writer waits up to the busy timeout for the first and
then gets :class:`StoreBusyError` ("database busy, try again").  On PostgreSQL the same
error comes from a lock wait longer than the timeout: every write transaction there first
takes one advisory lock, so writers take turns exactly as on SQLite (readers never wait).
"""

from __future__ import annotations

import contextlib
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

from sqlalchemy import create_engine, event, text
from sqlalchemy.engine import Engine, make_url
from sqlalchemy.exc import ArgumentError, DataError, DBAPIError, IntegrityError, OperationalError
from sqlalchemy.orm import Session

from phantomlab.errors import InputError
from phantomlab.store import migrate

__all__ = [
    "DEFAULT_URL",
    "ENV_VARIABLE",
    "Store",
    "StoreBusyError",
    "StoreConflictError",
    "open_store",
    "resolve_url",
    "sqlite_file",
]

#: Environment variable naming the database when no URL is given.
ENV_VARIABLE = "PHANTOMLAB_DB"
#: The database used when neither an argument nor the environment names one.
DEFAULT_URL = "sqlite:///phantomlab.sqlite"
#: How long a writer waits for another one before giving up [s].
DEFAULT_BUSY_TIMEOUT_S = 10.0

#: Key of the PostgreSQL advisory lock every write transaction holds (a constant of our own).
_PG_WRITE_LOCK = 7_262_032

# PostgreSQL SQLSTATEs that mean "someone else holds what we need": lock_not_available,
# serialization_failure, deadlock_detected (PostgreSQL documentation, Appendix A).
_PG_BUSY_STATES = {"55P03", "40001", "40P01"}


class StoreBusyError(InputError):
    """Another process held the database longer than the busy timeout."""


class StoreConflictError(InputError):
    """Another process changed the same record meanwhile (a version already taken)."""


def resolve_url(url: str | None = None) -> str:
    """The database URL: the argument, else ``$PHANTOMLAB_DB``, else :data:`DEFAULT_URL`."""
    chosen = url or os.environ.get(ENV_VARIABLE) or DEFAULT_URL
    try:
        parsed = make_url(chosen)
    except ArgumentError:
        raise InputError(
            f"database URL {chosen!r} is not an SQLAlchemy URL; accepted: "
            "sqlite:///FILE.sqlite or postgresql+psycopg://USER@HOST:PORT/DB"
        ) from None
    backend = parsed.get_backend_name()
    if backend not in ("sqlite", "postgresql"):
        raise InputError(
            f"database {backend!r} not supported; accepted: sqlite:///FILE.sqlite or "
            "postgresql+psycopg://USER@HOST:PORT/DB"
        )
    if backend == "postgresql" and parsed.drivername == "postgresql":
        parsed = parsed.set(drivername="postgresql+psycopg")
    return parsed.render_as_string(hide_password=False)


def _sqlite_engine(url: str, busy_timeout_s: float) -> Engine:
    engine = create_engine(url, connect_args={"timeout": busy_timeout_s})

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_connection, _record):  # noqa: ANN001
        # phantomlab emits BEGIN itself (below): the sqlite3 module's own transaction
        # handling would leave DDL outside transactions and never take the write lock early.
        dbapi_connection.isolation_level = None
        cursor = dbapi_connection.cursor()
        cursor.execute(f"PRAGMA busy_timeout = {int(busy_timeout_s * 1000)}")
        cursor.execute("PRAGMA foreign_keys = ON")
        if make_url(url).database not in (None, "", ":memory:"):
            cursor.execute("PRAGMA journal_mode = WAL")
        cursor.close()

    @event.listens_for(engine, "begin")
    def _on_begin(connection):  # noqa: ANN001
        write = connection.get_execution_options().get("phantomlab_write", False)
        connection.exec_driver_sql("BEGIN IMMEDIATE" if write else "BEGIN")

    return engine


def _postgres_engine(url: str, busy_timeout_s: float) -> Engine:
    milliseconds = int(busy_timeout_s * 1000)
    return create_engine(
        url,
        connect_args={"options": f"-c lock_timeout={milliseconds}", "connect_timeout": 10},
        pool_pre_ping=True,
    )


def _is_busy(exc: DBAPIError) -> bool:
    original = getattr(exc, "orig", None)
    state = getattr(original, "sqlstate", None) or getattr(original, "pgcode", None)
    if state in _PG_BUSY_STATES:
        return True
    text = str(original or exc).lower()
    return "database is locked" in text or "database is busy" in text


@dataclass
class Store:
    """An open batch log: the engine plus the transaction discipline around it."""

    url: str
    engine: Engine
    busy_timeout_s: float = DEFAULT_BUSY_TIMEOUT_S

    @property
    def dialect(self) -> str:
        """``'sqlite'`` or ``'postgresql'``."""
        return self.engine.dialect.name

    @contextlib.contextmanager
    def transaction(self) -> Iterator[Session]:
        """One write transaction: commits when the block ends, rolls back on any error.

        Lock waits past the busy timeout raise :class:`StoreBusyError`; a version taken by
        another process meanwhile raises :class:`StoreConflictError`.
        """
        with self._session(write=True) as session:
            yield session

    @contextlib.contextmanager
    def reading(self) -> Iterator[Session]:
        """A read-only transaction, rolled back at the end; the rows read stay usable."""
        with self._session(write=False) as session:
            yield session

    @contextlib.contextmanager
    def _session(self, *, write: bool) -> Iterator[Session]:
        bind = self.engine.execution_options(phantomlab_write=write)
        session = Session(bind=bind, expire_on_commit=False, autoflush=True)
        try:
            with session.begin():
                if write and self.dialect == "postgresql":
                    # one writer at a time, as SQLite's BEGIN IMMEDIATE gives: a command
                    # reads what it is about to change only once no other command writes
                    session.execute(text(f"SELECT pg_advisory_xact_lock({_PG_WRITE_LOCK})"))
                yield session
                if not write:
                    # detach what was read (still loaded, usable after the block), then undo
                    session.expunge_all()
                    session.rollback()
        except OperationalError as exc:
            if _is_busy(exc):
                raise StoreBusyError(
                    f"database busy, try again: another command held it longer than "
                    f"{self.busy_timeout_s:g} s"
                ) from None
            raise InputError(f"database error: {' '.join(str(exc.orig).split())}") from None
        except IntegrityError as exc:
            message = " ".join(str(exc.orig).split())
            lowered = message.lower()
            if ("unique" in lowered or "duplicate" in lowered) and (
                "version" in lowered or "supersedes" in lowered
            ):
                raise StoreConflictError(
                    "another command changed the same record meanwhile; try again"
                ) from None
            raise InputError(f"database refused the change: {message}") from None
        except DataError as exc:  # e.g. PostgreSQL: a text longer than its column allows
            raise InputError(f"database refused a value: {str(exc.orig).splitlines()[0][:200]}") from None
        except DBAPIError as exc:
            if _is_busy(exc):
                raise StoreBusyError(
                    f"database busy, try again: another command held it longer than "
                    f"{self.busy_timeout_s:g} s"
                ) from None
            raise
        finally:
            session.close()

    def close(self) -> None:
        """Release the connections."""
        self.engine.dispose()


def sqlite_file(url: str) -> Path | None:
    """The database file of an SQLite URL (None for PostgreSQL or an in-memory database)."""
    parsed = make_url(url)
    if parsed.get_backend_name() != "sqlite" or parsed.database in (None, "", ":memory:"):
        return None
    if parsed.database.startswith("file:"):
        return None  # a URI filename: leave it to SQLite
    return Path(parsed.database)


def open_store(
    url: str | None = None,
    *,
    busy_timeout_s: float = DEFAULT_BUSY_TIMEOUT_S,
    upgrade: bool = True,
    create: bool = True,
) -> Store:
    """Open (and create or upgrade) the batch log.

    Parameters
    ----------
    url : str, optional
        SQLAlchemy URL (``sqlite:///lab.sqlite``, ``postgresql+psycopg://user@host/db``;
        plain ``postgresql://`` selects psycopg).  Default: ``$PHANTOMLAB_DB``, else
        ``sqlite:///phantomlab.sqlite`` in the working folder.
    busy_timeout_s : float [s]
        How long a writer waits for a lock held by another process.
    upgrade : bool
        Migrate the schema to the newest revision (default).  Tests open older
        databases with ``upgrade=False``.
    create : bool
        Create an SQLite file that does not exist yet (default).  With False a missing
        file is refused in one line and nothing is created: the commands that only read or
        change records already in the log open it so.

    Returns
    -------
    Store
    """
    if not busy_timeout_s >= 0:
        raise InputError(f"busy_timeout_s {busy_timeout_s!r} must be >= 0 seconds")
    resolved = resolve_url(url)
    if not create:
        missing = sqlite_file(resolved)
        if missing is not None and not missing.exists():
            raise InputError(
                f"no batch log at {str(missing)!r}: `phantomlab batch add RECIPE.toml` starts one "
                "(or give --db URL of the lab's log)"
            )
    if make_url(resolved).get_backend_name() == "sqlite":
        engine = _sqlite_engine(resolved, busy_timeout_s)
    else:
        engine = _postgres_engine(resolved, busy_timeout_s)
    store = Store(url=resolved, engine=engine, busy_timeout_s=busy_timeout_s)
    if upgrade:
        try:
            migrate.upgrade(engine)
        except OperationalError as exc:
            engine.dispose()
            if _is_busy(exc):
                raise StoreBusyError(
                    "database busy, try again: another command is upgrading or writing it"
                ) from None
            raise InputError(
                f"cannot open database {make_url(resolved).render_as_string()}: "
                f"{' '.join(str(exc.orig).split())}"
            ) from None
    return store
