"""Fixtures for the page tests: a demo database of the test's own, and the page under AppTest.

The demo database is seeded once per test session (seeding plans and records the demo
batches through the store layer) and copied for every test, so tests do not see each other's
writes.  Tests drive the page with ``streamlit.testing.v1.AppTest``: they set widget values,
rerun, and assert on what the page shows.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

REPO_ROOT = Path(__file__).resolve().parents[2]
APP = REPO_ROOT / "app.py"

#: Seconds one script run of the page may take under AppTest (first runs import numba/plotly).
RUN_TIMEOUT_S = 120


@pytest.fixture(scope="session")
def seeded_demo_file(tmp_path_factory) -> Path:
    """A demo database seeded once per session by the page's own seeding path."""
    from phantomlab.ui.demo import seed_demo_database
    from phantomlab.ui.workspace import DEMO_SHELF, Workspace

    demo_file = tmp_path_factory.mktemp("demo-seed") / "phantomlab-demo.sqlite"
    workspace = Workspace(
        database_url=f"sqlite:///{demo_file}",
        shelf_path=DEMO_SHELF,
        is_demo=True,
        demo_file=demo_file,
    )
    import warnings

    from phantomlab.errors import PhantomlabWarning

    with warnings.catch_warnings():  # the fits' own range warnings are stored with them
        warnings.simplefilter("ignore", PhantomlabWarning)
        seed_demo_database(workspace)
    return demo_file


@pytest.fixture
def demo_file(seeded_demo_file, tmp_path, monkeypatch) -> Path:
    """A private copy of the seeded demo database; the page is pointed at it."""
    target = tmp_path / "phantomlab-demo.sqlite"
    shutil.copyfile(seeded_demo_file, target)
    monkeypatch.delenv("PHANTOMLAB_DB", raising=False)
    monkeypatch.delenv("PHANTOMLAB_SHELF", raising=False)
    monkeypatch.setenv("PHANTOMLAB_DEMO_DB", str(target))
    monkeypatch.chdir(tmp_path)
    return target


@pytest.fixture
def page(demo_file, downloads):
    """The page under AppTest, run once (it opens on the design page)."""
    from streamlit.testing.v1 import AppTest

    app = AppTest.from_file(str(APP), default_timeout=RUN_TIMEOUT_S)
    app.run()
    assert not app.exception, [e.message for e in app.exception]
    return app


def go_to(app, page_name: str):
    """Select a page in the side bar and rerun."""
    app.sidebar.radio(key="page").set_value(page_name)
    app.run()
    assert not app.exception, [e.message for e in app.exception]
    return app


def open_tab(app, key: str, label: str):
    """Open the tab ``label`` of the lazy tabs kept under ``key`` and rerun, as a click on it does.

    Only the open tab's content runs, so a test opens a tab before it uses the tab's fields.
    AppTest has no click for a tab: the tabs' state is set under their key, as the browser sends it.
    """
    shown = [tab.label for tab in app.tabs]
    assert label in shown, f"no tab {label!r}; shown: {shown}"
    app.session_state[key] = label
    app.run()
    assert not app.exception, [e.message for e in app.exception]
    assert any(tab.label == label and len(tab.children) > 0 for tab in app.tabs), f"tab {label!r} shows nothing"
    return app


def shown_text(app) -> str:
    """Everything the page shows as text (markdown, captions, alerts, headers, tables)."""
    parts: list[str] = []
    for kind in ("title", "header", "subheader", "markdown", "caption", "text", "code",
                 "info", "success", "warning", "error"):
        for element in getattr(app, kind):
            parts.append(str(element.value))
    for frame in app.dataframe:
        parts.append(frame.value.to_csv(index=False))
    for table in app.table:
        parts.append(table.value.to_csv(index=False))
    for metric in app.metric:
        parts.append(f"{metric.label} {metric.value}")
    return "\n".join(parts)


@pytest.fixture(name="go_to")
def go_to_fixture():
    """The :func:`go_to` helper, as a fixture (test modules are imported by importlib)."""
    return go_to


@pytest.fixture(name="open_tab")
def open_tab_fixture():
    """The :func:`open_tab` helper, as a fixture."""
    return open_tab


@pytest.fixture(name="shown_text")
def shown_text_fixture():
    """The :func:`shown_text` helper, as a fixture."""
    return shown_text


class _Downloads:
    """Keeps the in-memory media of every AppTest run so a test can read a download's bytes."""

    def __init__(self) -> None:
        self.storages: list = []

    def content(self, app, label: str) -> tuple[str, bytes]:
        """(file name, bytes) of the download button whose label starts with ``label``."""
        buttons = [b for b in app.get("download_button") if b.proto.label.startswith(label)]
        assert buttons, f"no download button {label!r}; shown: {[b.proto.label for b in app.get('download_button')]}"
        name = buttons[0].proto.url.rsplit("/", 1)[-1]
        for storage in reversed(self.storages):
            try:
                found = storage.get_file(name)
            except Exception:  # noqa: BLE001 - another run's storage
                continue
            return found.filename or name, bytes(found.content)
        raise AssertionError(f"download {label!r} ({name}) not in any run's media")


@pytest.fixture
def downloads(monkeypatch):
    """Read what a download button would hand the browser (AppTest keeps media per run)."""
    import streamlit.testing.v1.app_test as app_test_module
    from streamlit.runtime.memory_media_file_storage import MemoryMediaFileStorage

    kept = _Downloads()

    class KeptStorage(MemoryMediaFileStorage):
        def __init__(self, media_endpoint: str) -> None:
            super().__init__(media_endpoint)
            kept.storages.append(self)

    monkeypatch.setattr(app_test_module, "MemoryMediaFileStorage", KeptStorage)
    return kept
