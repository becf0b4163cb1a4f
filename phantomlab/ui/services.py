"""Glue between the pages and the lower layers (layer 5): open, load, cache, no physics.

The pages ask this module for the batch log (one :class:`~phantomlab.store.Store` per
database URL and process), the shelf (the stock file plus the stock versions added on the
page and kept in the batch log), the recipe files beside the shelf, and the calibrated
potencies.  Everything computed comes from the layers under the page.
"""

from __future__ import annotations

import datetime as _dt
import json
import tempfile
import tomllib
from pathlib import Path
from typing import Any

import streamlit as st

from phantomlab.shelf_export import PAGE_STOCK_SOURCE, materialise_resolved, page_stock_rows, shelf_document
from phantomlab.ui.workspace import Workspace, require_shelf

__all__ = [
    "PAGE_STOCK_SOURCE",
    "store_for",
    "shelf_document",
    "load_page_shelf",
    "shelf_state",
    "recipe_files",
    "recipe_catalogue",
    "calibrated_potencies",
]


@st.cache_resource(show_spinner=False)
def _open_store(url: str):
    from phantomlab.store import open_store  # layer 4

    return open_store(url)


def store_for(workspace: Workspace):
    """The batch log of this workspace (opened once per process, created when new)."""
    return _open_store(workspace.database_url)


def _cache_folder() -> Path:
    folder = Path(tempfile.gettempdir()) / "phantomlab-page-spectra"
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def page_document(workspace: Workspace, store) -> tuple[dict, dict[str, str]]:
    """The stock document the page works with: the file, with page additions laid over it.

    Returns the document and, per stock key, where its definition came from
    (``"stock file"`` or ``"page, version N"``).
    """
    document = shelf_document(require_shelf(workspace))
    stocks = dict(document.get("stocks", {}))
    origin = {key: "stock file" for key in stocks}
    folder = _cache_folder()
    for row in page_stock_rows(store):
        definition = dict(row.definition)
        stocks[row.stock_key] = materialise_resolved(row.stock_key, definition, folder)
        origin[row.stock_key] = f"page, version {row.version}"
    document = dict(document)
    document["stocks"] = stocks
    return document, origin


def load_page_shelf(workspace: Workspace, store):
    """The shelf the page designs with (stock file + page additions), and each stock's origin.

    Read once per state of the log (page stocks are stock-lot records) and of the stock
    file's folder tree (the stock file and the spectrum files it names): an edit of either is
    read on the next run.
    """
    from phantomlab.ui.page_cache import replay

    return replay(_load_page_shelf(*shelf_state(workspace, store), workspace, store))


def shelf_state(workspace: Workspace, store) -> tuple:
    """What the page's shelf depends on: the stock-lot records of the database (page stocks),
    the stock file, the state of its folder tree (its spectrum files) and the day (lots expire).

    Equal on two runs exactly when :func:`load_page_shelf` would read the same shelf; what is
    computed from the shelf is keyed on it.
    """
    from phantomlab.ui.page_cache import folder_state, log_state

    shelf_path = require_shelf(workspace)
    return (log_state(store, ("stock_lots",)), str(shelf_path), folder_state(shelf_path.parent),
            _dt.date.today().isoformat())


@st.cache_resource(show_spinner=False, max_entries=8)
def _load_page_shelf(log: tuple, shelf_path: str, files: tuple, today: str, _workspace: Workspace, _store):
    """:func:`load_page_shelf` once per (database and its state, stock file, state of its folder,
    day: lots expire), with the warnings of reading it (shown again on every run)."""
    from phantomlab.materials import parse_shelf  # layer 1
    from phantomlab.ui.page_cache import with_warnings

    def read():
        document, origin = page_document(_workspace, _store)
        path = Path(shelf_path)
        return parse_shelf(json.loads(json.dumps(document, default=str)), base=path.parent, path=path), origin

    return with_warnings(read)


def _listing(folder: Path) -> tuple:
    """(name, modification time, size) of every ``*.toml`` in ``folder``: cheap to take each run."""
    found = []
    for path in sorted(folder.glob("*.toml")):
        try:
            stat = path.stat()
        except OSError:
            continue
        found.append((path.name, stat.st_mtime_ns, stat.st_size))
    return tuple(found)


@st.cache_data(show_spinner=False, max_entries=8)
def _recipe_catalogue(folder: str, listing: tuple) -> dict[str, str]:
    """File name -> recipe name of the recipe files (TOML with ``[target]`` and ``name``) in ``folder``.

    Read once per state of the folder (``listing``), not on every run of the page.
    """
    catalogue = {}
    for name, _mtime, _size in listing:
        try:
            document = tomllib.loads((Path(folder) / name).read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
            continue
        if "target" in document and "name" in document:
            catalogue[name] = str(document["name"])
    return catalogue


def recipe_catalogue(workspace: Workspace) -> dict[str, str]:
    """File name -> recipe name of the recipe files beside the shelf, by file name."""
    if workspace.shelf_path is None:
        return {}
    folder = workspace.recipes_folder
    return dict(_recipe_catalogue(str(folder), _listing(folder)))


def recipe_files(workspace: Workspace) -> list[Path]:
    """Recipe files beside the shelf (TOML files with a ``[target]`` table), by name."""
    return [workspace.recipes_folder / name for name in recipe_catalogue(workspace)]


def calibrated_potencies(store, shelf) -> dict[str, tuple[float, float]]:
    """``{stock: (potency, sd)}`` of the lots now on the shelf, from the newest calibration."""
    from phantomlab.store import potencies_for_shelf  # layer 4

    return potencies_for_shelf(store, shelf)


def plain(value: Any) -> Any:
    """A JSON-ready copy (numpy arrays and dates made plain)."""
    from phantomlab.jsonable import to_jsonable

    return to_jsonable(value)
