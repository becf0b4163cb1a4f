"""Fixtures of the batch-log tests: every store test runs on SQLite AND on a real PostgreSQL.

``postgres_server`` (session scope) starts a throw-away PostgreSQL cluster with Debian's
binaries (/usr/lib/postgresql/*/bin): initdb with trust authentication in a temporary
folder, a free local port, the socket in that folder; as root the server runs as the
``postgres`` user.  It only STARTS a server (``.ci/run`` installs PostgreSQL when missing);
when none can be started the PostgreSQL tests skip and say why.  Each test gets a fresh
database on that server; the cluster is stopped and removed at the end of the session.
"""

from __future__ import annotations

import glob
import os
import shutil
import socket
import subprocess
import tempfile
import uuid
from dataclasses import dataclass
from pathlib import Path

import pytest


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def _as_server_user(argv: list[str]) -> list[str]:
    if os.geteuid() != 0:
        return argv
    runuser = shutil.which("runuser")
    if runuser:
        return [runuser, "-u", "postgres", "--", *argv]
    return ["su", "postgres", "-c", " ".join(f"'{a}'" for a in argv)]


@dataclass
class PostgresServer:
    """A running throw-away cluster."""

    host: str
    port: int
    folder: Path
    bin_dir: Path

    def url(self, database: str) -> str:
        return f"postgresql+psycopg://postgres@{self.host}:{self.port}/{database}"

    def _admin(self, sql: str) -> None:
        import psycopg

        with psycopg.connect(
            host=self.host, port=self.port, user="postgres", dbname="postgres", autocommit=True
        ) as connection:
            connection.execute(sql)

    def new_database(self) -> str:
        name = f"lab_{uuid.uuid4().hex[:12]}"
        self._admin(f'CREATE DATABASE "{name}"')
        return name

    def drop_database(self, name: str) -> None:
        self._admin(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


def _start_server() -> tuple[PostgresServer | None, str]:
    initdbs = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"))
    if not initdbs:
        return None, "PostgreSQL is not installed (no /usr/lib/postgresql/*/bin/initdb)"
    try:
        import psycopg  # noqa: F401
    except ImportError:
        return None, "the psycopg driver is not installed (pip install 'psycopg[binary]')"
    if os.geteuid() == 0:
        try:
            import pwd

            pwd.getpwnam("postgres")
        except KeyError:
            return None, "running as root but there is no 'postgres' user to run the server"
    bin_dir = Path(initdbs[-1]).parent
    folder = Path(tempfile.mkdtemp(prefix="phantomlab-pg-"))
    if os.geteuid() == 0:
        shutil.chown(folder, user="postgres")
    data = folder / "data"
    port = _free_port()
    initdb = _as_server_user(
        [str(bin_dir / "initdb"), "-D", str(data), "-A", "trust", "-U", "postgres",
         "-E", "UTF8", "--no-sync"]
    )
    done = subprocess.run(initdb, capture_output=True, text=True)
    if done.returncode != 0:
        shutil.rmtree(folder, ignore_errors=True)
        return None, f"initdb failed: {(done.stderr or done.stdout).strip().splitlines()[-1:]}"
    options = (f"-p {port} -k {folder} -c listen_addresses=127.0.0.1 -c fsync=off "
               "-c synchronous_commit=off -c full_page_writes=off")
    start = _as_server_user(
        [str(bin_dir / "pg_ctl"), "-D", str(data), "-o", options, "-l", str(folder / "log"),
         "-w", "-t", "60", "start"]
    )
    done = subprocess.run(start, capture_output=True, text=True)
    if done.returncode != 0:
        log = (folder / "log").read_text(errors="replace") if (folder / "log").exists() else ""
        shutil.rmtree(folder, ignore_errors=True)
        return None, f"pg_ctl start failed: {(log or done.stderr).strip().splitlines()[-1:]}"
    return PostgresServer(host="127.0.0.1", port=port, folder=folder, bin_dir=bin_dir), ""


def _stop_server(server: PostgresServer) -> None:
    stop = _as_server_user(
        [str(server.bin_dir / "pg_ctl"), "-D", str(server.folder / "data"), "-m", "fast",
         "-w", "stop"]
    )
    subprocess.run(stop, capture_output=True, text=True)
    shutil.rmtree(server.folder, ignore_errors=True)


@pytest.fixture(scope="session")
def postgres_server():
    """A throw-away PostgreSQL cluster for the whole session (skips, saying why, if none)."""
    server, why = _start_server()
    if server is None:
        pytest.skip(f"PostgreSQL tests skipped: {why}")
    try:
        yield server
    finally:
        _stop_server(server)


@pytest.fixture(params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)])
def db_url(request, tmp_path):
    """The URL of a fresh, empty batch log on each engine."""
    if request.param == "sqlite":
        yield f"sqlite:///{tmp_path / 'lab.sqlite'}"
        return
    server: PostgresServer = request.getfixturevalue("postgres_server")
    name = server.new_database()
    yield server.url(name)
    server.drop_database(name)


@pytest.fixture
def store(db_url):
    """An opened (migrated) store on a fresh database."""
    from phantomlab.store import open_store

    opened = open_store(db_url)
    yield opened
    opened.close()


# --- small stand-ins for the stock and recipe objects the store snapshots -------------------
# The store only reads attributes of them (duck typing), so these plain records exercise the
# store without depending on the physics layers; the CLI flow tests use the real ones.


@dataclass(frozen=True)
class FakeStock:
    key: str
    kind: str = "absorber"
    lot: str | None = "demo-lot-1"
    expiry: object = None
    potency: float = 1.0
    potency_sd: float = 0.1
    definition: dict = None  # type: ignore[assignment]


@dataclass(frozen=True)
class FakeRecipe:
    name: str
    content_hash: str
    version: str = "1"
    path: str | None = None
    definition: dict = None  # type: ignore[assignment]


@pytest.fixture
def planned_batch():
    """``planned_batch(session, **kw) -> Batch``: record a lot, a recipe and a planned batch."""
    from phantomlab.store import add_batch, next_batch_code, record_recipe, record_stock_lot

    def make(session, *, recipe_name="demo recipe", stock_key="dyeA", lot="demo-lot-1",
             plan=None, operator="demo operator"):
        stock = FakeStock(key=stock_key, lot=lot, definition={"kind": "absorber", "spectrum": [[600, 0.5], [700, 0.4]]})
        lot_row = record_stock_lot(session, stock)
        recipe = record_recipe(
            session,
            FakeRecipe(name=recipe_name, content_hash=f"hash-of-{recipe_name}",
                       definition={"name": recipe_name, "stocks": [stock_key]}),
        )
        code = next_batch_code(session)
        return add_batch(
            session, code=code, recipe=recipe,
            plan=plan or {"recipe": recipe_name, "batch_volume_ml": 100.0,
                          "doses": [{"stock": stock_key, "volume_fraction": 0.01, "volume_ml": 1.0}]},
            sheet_html=f"<html><body>batch {code}</body></html>",
            potencies_used={stock_key: [1.0, 0.1]}, lots={stock_key: lot_row},
            software_version="test", operator=operator,
        )

    return make


def table_counts(store) -> dict[str, int]:
    """Row count of every table (to show that a refused command wrote nothing)."""
    from sqlalchemy import func, select

    from phantomlab.store.schema import Base

    with store.reading() as session:
        return {
            name: session.scalar(select(func.count()).select_from(table))
            for name, table in Base.metadata.tables.items()
        }


@pytest.fixture
def counts():
    return table_counts
