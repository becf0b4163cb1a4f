"""Which database and shelf the page works on (layer 5).

The page runs either on a lab's own database or on a demo database of its own:

* ``streamlit run app.py -- --db URL`` or the ``PHANTOMLAB_DB`` environment variable name the
  lab's database (an SQLAlchemy URL).  It never receives demo data.
* With neither, the page opens the demo database file ``demo-data/phantomlab-demo.sqlite``
  beside ``app.py`` (or the file ``PHANTOMLAB_DEMO_DB`` names) and seeds it on first use with
  the invented demo shelf and three demo batches (:mod:`phantomlab.ui.demo`).

The stock file (the shelf) comes from ``--shelf FILE`` or ``PHANTOMLAB_SHELF``.  A lab database
opened without one can be read, fitted and recalibrated, but the design and shelf pages ask
for the stock file (the demo shelf never reaches a lab's database); the demo uses
``recipes/demo-stocks.toml``.
"""

from __future__ import annotations

import argparse
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping, Sequence

from phantomlab.errors import InputError

__all__ = ["Workspace", "resolve_workspace", "require_shelf", "REPO_ROOT", "DEMO_SHELF", "DEMO_DATABASE",
           "NO_SHELF"]

#: What the page says where a lab database was opened without its stock file.
NO_SHELF = ("no stock file given: start the page with --shelf STOCKS.toml or PHANTOMLAB_SHELF "
            "(make run DB=URL SHELF=STOCKS.toml); the demo shelf is only used with the demo database")


def require_shelf(workspace: "Workspace") -> Path:
    """The stock file, or a one-line refusal for a lab database opened without one."""
    if workspace.shelf_path is None:
        raise InputError(NO_SHELF)
    return workspace.shelf_path

#: The folder holding app.py, recipes/ and demo-data/.
REPO_ROOT = Path(__file__).resolve().parents[2]
#: The invented demo shelf (demo data, invented).
DEMO_SHELF = REPO_ROOT / "recipes" / "demo-stocks.toml"
#: Where the demo database lives unless PHANTOMLAB_DEMO_DB says otherwise.
DEMO_DATABASE = REPO_ROOT / "demo-data" / "phantomlab-demo.sqlite"


@dataclass(frozen=True)
class Workspace:
    """The database URL, the stock file, and whether this is the demo."""

    database_url: str
    shelf_path: Path | None  # None: a lab database opened without its stock file
    is_demo: bool
    demo_file: Path | None = None  # the demo database file, when is_demo

    @property
    def recipes_folder(self) -> Path:
        """Where recipe files are looked for (the shelf's folder; else the working folder)."""
        return self.shelf_path.parent if self.shelf_path is not None else Path.cwd()

    def page_recipes_folder(self, environ: Mapping[str, str] | None = None) -> Path:
        """Where recipes designed or edited on the page are written when a batch is saved.

        Demo: ``demo-data/recipes`` beside the demo database.  A lab: ``PHANTOMLAB_RECIPES_DIR``,
        else ``phantomlab-recipes`` in the working folder.
        """
        if self.is_demo and self.demo_file is not None:
            return Path(self.demo_file).parent / "recipes"
        environ = os.environ if environ is None else environ
        text = environ.get("PHANTOMLAB_RECIPES_DIR")
        return Path(text).expanduser().resolve() if text else Path.cwd() / "phantomlab-recipes"


def _parse_arguments(argv: Sequence[str]) -> argparse.Namespace:
    parser = argparse.ArgumentParser(prog="streamlit run app.py --", add_help=False)
    parser.add_argument("--db", default=None)
    parser.add_argument("--shelf", default=None)
    known, _unknown = parser.parse_known_args(list(argv))
    return known


def resolve_workspace(argv: Sequence[str], environ: Mapping[str, str]) -> Workspace:
    """Decide the database and the shelf from the script arguments and the environment.

    Parameters
    ----------
    argv : sequence of str
        The arguments after ``--`` of ``streamlit run app.py -- ...``.
    environ : mapping
        The environment (``PHANTOMLAB_DB``, ``PHANTOMLAB_SHELF``, ``PHANTOMLAB_DEMO_DB``).
    """
    arguments = _parse_arguments(argv)
    url = arguments.db or environ.get("PHANTOMLAB_DB") or None
    shelf_text = arguments.shelf or environ.get("PHANTOMLAB_SHELF") or None
    shelf_path = Path(shelf_text).expanduser().resolve() if shelf_text else DEMO_SHELF
    if shelf_text and not shelf_path.is_file():
        raise InputError(f"stock file {shelf_text!r} not found; give a stocks TOML file")
    if url:
        # without the lab's stock file the log can be read, fitted and recalibrated, but nothing
        # is designed: the demo shelf must never reach a lab's database through a saved batch
        return Workspace(database_url=url, shelf_path=shelf_path if shelf_text else None, is_demo=False)
    demo_text = environ.get("PHANTOMLAB_DEMO_DB")
    demo_file = Path(demo_text).expanduser().resolve() if demo_text else DEMO_DATABASE
    return Workspace(
        database_url=f"sqlite:///{demo_file}",
        shelf_path=DEMO_SHELF if not shelf_text else shelf_path,
        is_demo=True,
        demo_file=demo_file,
    )


def environment() -> dict[str, str]:
    """The process environment as a plain dict (a seam for tests)."""
    return dict(os.environ)
