"""Run the Alembic migrations shipped in ``phantomlab/store/migrations`` (layer 4).

:func:`upgrade` brings a database to a revision (the head by default) in ONE write
transaction: on SQLite the transaction starts with ``BEGIN IMMEDIATE`` (transactional DDL),
on PostgreSQL it first takes an advisory lock, so two processes opening a new database at
the same moment do not both create the tables.
"""

from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy.engine import Engine

from phantomlab.errors import InputError

__all__ = ["MIGRATIONS_DIR", "current_revision", "head_revision", "upgrade"]

#: Folder of the Alembic environment (env.py + versions/).
MIGRATIONS_DIR = Path(__file__).resolve().parent / "migrations"

#: Key of the PostgreSQL advisory lock held while migrating (any constant of our own).
_PG_MIGRATION_LOCK = 7_262_031


def _config() -> Config:
    config = Config()
    config.set_main_option("script_location", str(MIGRATIONS_DIR))
    return config


def head_revision() -> str:
    """The newest schema revision this version of phantomlab knows."""
    return ScriptDirectory.from_config(_config()).get_current_head()


def current_revision(engine: Engine) -> str | None:
    """The revision a database is at (None for an empty database)."""
    with engine.connect() as connection:
        revision = MigrationContext.configure(connection).get_current_revision()
        connection.rollback()
    return revision


def upgrade(engine: Engine, revision: str = "head") -> str | None:
    """Migrate the database behind ``engine`` up to ``revision``; return the new revision.

    Refuses, with one line, a database whose revision this phantomlab does not know (made
    by a newer version).  Does nothing, and takes no write lock, when already there.
    """
    config = _config()
    script = ScriptDirectory.from_config(config)
    known = {rev.revision for rev in script.walk_revisions()}
    target = script.get_current_head() if revision == "head" else revision
    if target not in known:
        raise InputError(f"unknown schema revision {revision!r}; known: {', '.join(sorted(known))}")
    present = current_revision(engine)
    if present is not None and present not in known:
        raise InputError(
            f"database schema revision {present!r} is newer than this phantomlab "
            f"(knows up to {script.get_current_head()!r}); upgrade phantomlab"
        )
    if present == target:
        return present
    write_engine = engine.execution_options(phantomlab_write=True)
    with write_engine.begin() as connection:
        if connection.dialect.name == "postgresql":
            connection.exec_driver_sql(f"SELECT pg_advisory_xact_lock({_PG_MIGRATION_LOCK})")
        present_now = MigrationContext.configure(connection).get_current_revision()
        if present_now != target:
            config.attributes["connection"] = connection
            command.upgrade(config, target)
    return target
