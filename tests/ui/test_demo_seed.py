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


def test_the_seeded_database_holds_the_oximeter_batch_and_its_series(seeded_demo_file):
    """Batch -001 is the invented oximeter test (recipes/demo-oximeter-blood.toml) with its demo
    deoxygenation series and blood-gas readings, unmixed as ``oxygenation add`` does."""
    import datetime as _dt

    from phantomlab.oxygenation_workflow import oxygenation_of
    from phantomlab.store import get_batch, list_batches, open_store, recipe_of
    from phantomlab.ui.demo import DEMO_OXIMETER_DAY

    store = open_store(f"sqlite:///{seeded_demo_file}", create=False)
    try:
        with store.reading() as session:
            batches = list_batches(session)
            first = get_batch(session, batches[0].code)
            recipe_name = recipe_of(session, first).name
            status, mixed_on = first.status, first.mixed_on
        (series,) = oxygenation_of(store, batches[0].code)
    finally:
        store.close()
    assert len(batches) == 3 and batches[0].code == f"{_dt.date.today().year}-001"
    assert recipe_name.startswith("demo: oximeter test") and status == "characterised"
    assert mixed_on == DEMO_OXIMETER_DAY
    assert series["series_file_name"] == "demo-oximeter-series.csv"
    assert series["readings_file_name"] == "demo-oximeter-references.csv"
    assert series["chromophores"] == ["hbo2", "hb", "water"] and series["source"] == "gratzer-kollias"
    assert len(series["points"]) == 13 and len(series["readings"]) == 7  # every 5 min for an hour; 7 samples
    # The synthetic series: sO2 from 0.98 down to 0.02 (logistic, 30 min, 7 min), 35 µM, 1 % noise
    # (make_demo_oxygenation.py); the readings are the truth + 0.01 normal error.
    so2 = [p["so2"] for p in series["points"]]
    assert so2[0] > 0.9 and so2[-1] < 0.1 and all(a >= b - 0.03 for a, b in zip(so2, so2[1:]))
    assert all(abs(p["thb_um"] / 35.0 - 1) < 0.03 for p in series["points"])
    assert all(c["how"] == "interpolated" and abs(c["difference"]) < 0.03 for c in series["comparison"])
