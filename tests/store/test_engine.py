"""open_store: URL choice, SQLite settings, PostgreSQL by URL."""

from __future__ import annotations

import pytest
from sqlalchemy import text

from phantomlab.errors import InputError
from phantomlab.store import open_store, resolve_url
from phantomlab.store.engine import DEFAULT_URL, ENV_VARIABLE


def test_url_argument_wins_over_environment(monkeypatch):
    monkeypatch.setenv(ENV_VARIABLE, "sqlite:///from-env.sqlite")
    assert resolve_url("sqlite:///given.sqlite") == "sqlite:///given.sqlite"


def test_url_from_environment(monkeypatch):
    monkeypatch.setenv(ENV_VARIABLE, "sqlite:///from-env.sqlite")
    assert resolve_url(None) == "sqlite:///from-env.sqlite"


def test_default_url_is_a_file_in_the_working_folder(monkeypatch, tmp_path):
    monkeypatch.delenv(ENV_VARIABLE, raising=False)
    monkeypatch.chdir(tmp_path)
    assert resolve_url() == DEFAULT_URL
    store = open_store()
    store.close()
    assert (tmp_path / "phantomlab.sqlite").is_file()


def test_plain_postgresql_url_selects_psycopg():
    assert resolve_url("postgresql://lab@db.example/phantoms").startswith("postgresql+psycopg://")


@pytest.mark.parametrize(
    "url, match",
    [
        ("not a url at all", "is not an SQLAlchemy URL"),
        ("mysql://lab@host/db", "database 'mysql' not supported"),
    ],
)
def test_bad_urls_are_refused_with_one_line(url, match):
    with pytest.raises(InputError, match=match):
        resolve_url(url)


def test_negative_busy_timeout_refused(tmp_path):
    with pytest.raises(InputError, match="busy_timeout_s"):
        open_store(f"sqlite:///{tmp_path / 'x.sqlite'}", busy_timeout_s=-1)


def test_sqlite_runs_in_wal_mode_with_foreign_keys_and_busy_timeout(tmp_path):
    store = open_store(f"sqlite:///{tmp_path / 'lab.sqlite'}", busy_timeout_s=2.5)
    with store.reading() as session:
        assert session.execute(text("PRAGMA journal_mode")).scalar() == "wal"
        assert session.execute(text("PRAGMA foreign_keys")).scalar() == 1
        assert session.execute(text("PRAGMA busy_timeout")).scalar() == 2500
    store.close()


def test_unreachable_postgresql_is_one_line(monkeypatch):
    # port 9 (discard) on localhost: nothing listens there on a test machine
    with pytest.raises(InputError, match="cannot open database"):
        open_store("postgresql+psycopg://nobody@127.0.0.1:9/none")


@pytest.mark.postgres
def test_postgresql_store_opens_and_reports_its_dialect(store):
    assert store.dialect in ("sqlite", "postgresql")
    with store.reading() as session:
        assert session.execute(text("SELECT 1")).scalar() == 1
