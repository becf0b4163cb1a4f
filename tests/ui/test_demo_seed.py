"""The demo database is seeded once, and again when an older phantomlab seeded it.

The demo database holds demo data only (an invented lab); a copy seeded by another version
of the demo data (SQLite's ``user_version``, the database header's own field for it) would
show old demo files fitted with newer models, so the page rewrites it.
"""

import shutil
import sqlite3
import warnings

from phantomlab.errors import PhantomlabWarning
from phantomlab.ui.demo import DEMO_SEED_VERSION, _seeded_version, ensure_demo_database
from phantomlab.ui.workspace import DEMO_SHELF, Workspace


def _workspace(path):
    return Workspace(database_url=f"sqlite:///{path}", shelf_path=DEMO_SHELF, is_demo=True, demo_file=path)


def _batches(path):
    with sqlite3.connect(path) as connection:
        return connection.execute("SELECT count(*) FROM batches").fetchone()[0]


def test_a_current_demo_database_is_left_alone(seeded_demo_file, tmp_path):
    assert _seeded_version(seeded_demo_file) == DEMO_SEED_VERSION
    copy = tmp_path / "phantomlab-demo.sqlite"
    shutil.copyfile(seeded_demo_file, copy)
    before = copy.read_bytes()
    assert ensure_demo_database(_workspace(copy)).value is False
    assert copy.read_bytes() == before


def test_a_demo_database_of_another_version_is_seeded_again(seeded_demo_file, tmp_path):
    copy = tmp_path / "phantomlab-demo.sqlite"
    shutil.copyfile(seeded_demo_file, copy)
    with sqlite3.connect(copy) as connection:
        connection.execute("PRAGMA user_version = 1")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        outcome = ensure_demo_database(_workspace(copy))
    assert outcome.ok and outcome.value is True
    assert _seeded_version(copy) == DEMO_SEED_VERSION
    assert _batches(copy) == _batches(seeded_demo_file)
    assert not list(tmp_path.glob("*.seeding-*"))
