"""What the page's caches are keyed on, and warnings kept with a cached value (layer 5).

A rerun must not compute again what did not change, and must see every change that did.
The page's caches (``st.cache_resource``, shared by every session of the server) are keyed
on cheap stamps taken on each run:

* :func:`log_state`: the database URL and the batch log's stamp
  (:func:`phantomlab.store.log_stamp`: the row count and largest id of every table; the log
  is append-only, so any record added by this or another session or process changes it);
* :func:`folder_state`: name, modification time and size of the data files (``*.toml``,
  ``*.csv``) in a folder tree, so an edited stock, recipe or spectrum file is read again;
* a file's content itself (its SHA-256) where a file is the input.

A layer call that warns (a :class:`~phantomlab.errors.PhantomlabWarning`) warns again when
its value comes from the cache: :func:`with_warnings` keeps the warnings beside the value
and :func:`replay` raises them again inside :func:`~phantomlab.ui.widgets.call_layer`.
"""

from __future__ import annotations

import hashlib
import os
import time
import warnings
from pathlib import Path
from typing import Any, Callable

import streamlit as st

from phantomlab.errors import PhantomlabWarning

__all__ = ["MAX_FOLDER_FILES", "cached_on", "content_key", "folder_state", "log_state", "replay", "with_warnings"]

#: The most data files :func:`folder_state` lists [count]; a bigger tree is never cached.
MAX_FOLDER_FILES = 2000
#: How deep :func:`folder_state` looks under the folder [levels].
MAX_FOLDER_DEPTH = 4
DATA_SUFFIXES = (".toml", ".csv")


def log_state(store, tables: tuple[str, ...] | None = None) -> tuple:
    """``(database URL, stamp of the log)``: equal on two runs exactly when nothing was recorded
    (in ``tables`` only, when given)."""
    from phantomlab.store import log_stamp  # layer 4

    with store.reading() as session:
        return store.url, log_stamp(session, tables=tables)


def folder_state(folder: Path | str | None, suffixes: tuple[str, ...] = DATA_SUFFIXES) -> tuple:
    """(relative path, modification time [ns], size [bytes]) of every data file under ``folder``.

    ``suffixes``: the file endings watched (default ``.toml`` and ``.csv``).

    Hidden folders are skipped.  A tree with more than :data:`MAX_FOLDER_FILES` data files
    gives a state that never repeats (what depends on it is computed on every run).
    """
    if folder is None:
        return ()
    root = Path(folder)
    found: list[tuple[str, int, int]] = []
    pending = [(root, 0)]
    while pending:
        current, depth = pending.pop()
        try:
            entries = list(os.scandir(current))
        except OSError:
            continue
        for entry in entries:
            if entry.name.startswith(".") or entry.name == "__pycache__":
                continue
            try:
                if entry.is_dir(follow_symlinks=False):
                    if depth < MAX_FOLDER_DEPTH:
                        pending.append((Path(entry.path), depth + 1))
                    continue
                if not entry.name.lower().endswith(suffixes):
                    continue
                stat = entry.stat()
            except OSError:
                continue
            found.append((os.path.relpath(entry.path, root), stat.st_mtime_ns, stat.st_size))
            if len(found) > MAX_FOLDER_FILES:
                return ("too many files to watch", time.monotonic_ns())
    return (str(root), tuple(sorted(found)))


def content_key(data: bytes | str) -> str:
    """SHA-256 of a file's content (text as UTF-8): the key of what is computed from it."""
    raw = data.encode("utf-8", "surrogatepass") if isinstance(data, str) else bytes(data)
    return hashlib.sha256(raw).hexdigest()


def with_warnings(function: Callable[..., Any], *args: Any, **kwargs: Any) -> tuple[Any, tuple]:
    """``(value, warnings)`` of a call: the physics warnings it raised, kept for :func:`replay`."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PhantomlabWarning)
        value = function(*args, **kwargs)
    kept = tuple((str(item.message), item.category) for item in caught
                 if issubclass(item.category, PhantomlabWarning))
    return value, kept


def replay(kept: tuple[Any, tuple]) -> Any:
    """The value of :func:`with_warnings`, raising its warnings again (for ``call_layer``)."""
    value, caught = kept
    for message, category in caught:
        warnings.warn(message, category, stacklevel=2)
    return value


def cached_on(key: str, step: str, function: Callable[..., Any], *args: Any, **kwargs: Any) -> Any:
    """``function(*args, **kwargs)`` once per ``(key, step)``, its warnings raised again on every run.

    ``key`` must name everything the call depends on (built from the stamps above); ``step``
    names the call.  A call that raises is not kept (a refusal is tried again next run).
    """
    return replay(_cached_step(key, step, function, args, kwargs))


@st.cache_resource(show_spinner=False, max_entries=64)
def _cached_step(key: str, step: str, _function, _args: tuple, _kwargs: dict):
    return with_warnings(_function, *_args, **_kwargs)
