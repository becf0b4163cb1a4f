"""The demo database: seeded once on first run, in a file of its own; a lab's database never.

The rule is issue 7, item 6: `make run` seeds the demo shelf and the demo batches into a
demo database file of its own; a lab's own database (``--db``, ``PHANTOMLAB_DB``) never
receives demo data.
"""

from __future__ import annotations

import tomllib

import pytest
from streamlit.testing.v1 import AppTest

from phantomlab.ui.workspace import DEMO_SHELF, REPO_ROOT

APP = str(REPO_ROOT / "app.py")


def _counts(url: str) -> dict[str, int]:
    from sqlalchemy import func, select

    from phantomlab.store import open_store
    from phantomlab.store.schema import Batch, Measurement, StockLot

    store = open_store(url)
    try:
        with store.reading() as session:
            return {model.__tablename__: session.scalar(select(func.count()).select_from(model))
                    for model in (StockLot, Batch, Measurement)}
    finally:
        store.close()


@pytest.fixture
def clean_env(monkeypatch, tmp_path):
    for name in ("PHANTOMLAB_DB", "PHANTOMLAB_SHELF", "PHANTOMLAB_DEMO_DB"):
        monkeypatch.delenv(name, raising=False)
    monkeypatch.chdir(tmp_path)
    return monkeypatch


def test_first_run_seeds_the_demo_file_and_the_page_says_it_is_demo_data(clean_env, tmp_path):
    demo = tmp_path / "demo-data" / "phantomlab-demo.sqlite"
    clean_env.setenv("PHANTOMLAB_DEMO_DB", str(demo))
    app = AppTest.from_file(APP, default_timeout=120).run()
    assert not app.exception
    assert demo.is_file()
    assert not list(demo.parent.glob("*.seeding-*"))  # the partial file was moved into place
    assert any("Demo data." in i.value for i in app.info)
    counts = _counts(f"sqlite:///{demo}")
    stocks = tomllib.loads(DEMO_SHELF.read_text(encoding="utf-8"))["stocks"]
    assert counts["batches"] >= 3  # three batches, each with several versions
    assert counts["measurements"] == 3  # batch 1 measured on day 1 and day 15, batch 2 on day 2
    assert counts["stock_lots"] == len(stocks)
    from phantomlab.store import list_batches, open_store

    store = open_store(f"sqlite:///{demo}")
    try:
        with store.reading() as session:
            assert len(list_batches(session)) == 3
    finally:
        store.close()


def test_a_second_run_does_not_seed_again(clean_env, tmp_path):
    demo = tmp_path / "demo.sqlite"
    clean_env.setenv("PHANTOMLAB_DEMO_DB", str(demo))
    AppTest.from_file(APP, default_timeout=120).run()
    before = _counts(f"sqlite:///{demo}")
    app = AppTest.from_file(APP, default_timeout=120).run()
    assert not app.exception
    assert _counts(f"sqlite:///{demo}") == before


def _lab_shelf(tmp_path):
    """The lab's own stock file (for the test: a copy of the demo shelf's content and spectra)."""
    import shutil

    folder = tmp_path / "lab-stocks"
    shutil.copytree(DEMO_SHELF.parent, folder, ignore=shutil.ignore_patterns("demo-*.toml"))
    shutil.copyfile(DEMO_SHELF, folder / "stocks.toml")
    return folder / "stocks.toml"


def test_a_labs_database_never_receives_demo_data(clean_env, tmp_path):
    lab = tmp_path / "lab.sqlite"
    demo = tmp_path / "demo.sqlite"
    clean_env.setenv("PHANTOMLAB_DB", f"sqlite:///{lab}")
    clean_env.setenv("PHANTOMLAB_SHELF", str(_lab_shelf(tmp_path)))
    clean_env.setenv("PHANTOMLAB_DEMO_DB", str(demo))
    app = AppTest.from_file(APP, default_timeout=120).run()
    assert not app.exception
    assert not any("Demo data." in i.value for i in app.info)
    app.sidebar.radio(key="page").set_value("Batch log").run()
    assert any("No batch yet" in i.value for i in app.info)
    assert _counts(f"sqlite:///{lab}") == {"stock_lots": 0, "batches": 0, "measurements": 0}
    assert not demo.exists()


def test_seeding_refuses_a_lab_database(tmp_path):
    from phantomlab.ui.demo import seed_demo_database
    from phantomlab.ui.workspace import Workspace

    lab = Workspace(database_url=f"sqlite:///{tmp_path / 'lab.sqlite'}", shelf_path=DEMO_SHELF, is_demo=False)
    with pytest.raises(RuntimeError, match="demo data go into the demo database only"):
        seed_demo_database(lab)
    assert not (tmp_path / "lab.sqlite").exists()


@pytest.mark.parametrize("page_name", ["Design a phantom", "Stock shelf", "Batch log", "Fit and correct"])
def test_every_page_opens_on_an_empty_lab_database(clean_env, tmp_path, page_name):
    clean_env.setenv("PHANTOMLAB_DB", f"sqlite:///{tmp_path / 'lab.sqlite'}")
    clean_env.setenv("PHANTOMLAB_SHELF", str(_lab_shelf(tmp_path)))
    app = AppTest.from_file(APP, default_timeout=120).run()
    app.sidebar.radio(key="page").set_value(page_name).run()
    assert not app.exception, [e.message for e in app.exception]
    assert page_name in [h.value for h in app.header]
    errors = [e.value for e in app.error]
    if page_name == "Design a phantom":  # no recipe file beside the lab's stock file: a blank recipe
        assert errors == ["Stocks: choose at least one scatterer or absorber.",
                          "Target: give μa or μs′ (or both) at the wavelengths."]
    else:
        assert not errors


@pytest.mark.parametrize("page_name, needs_shelf", [("Design a phantom", True), ("Stock shelf", True),
                                                     ("Batch log", False), ("Fit and correct", False)])
def test_a_lab_database_without_a_stock_file_never_falls_back_to_the_demo_shelf(clean_env, tmp_path,
                                                                                 page_name, needs_shelf):
    lab = tmp_path / "lab.sqlite"
    clean_env.setenv("PHANTOMLAB_DB", f"sqlite:///{lab}")
    app = AppTest.from_file(APP, default_timeout=120).run()
    app.sidebar.radio(key="page").set_value(page_name).run()
    assert not app.exception
    refused = [e.value for e in app.error if "no stock file given" in e.value]
    assert bool(refused) == needs_shelf
    assert _counts(f"sqlite:///{lab}") == {"stock_lots": 0, "batches": 0, "measurements": 0}
