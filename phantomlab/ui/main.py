"""The frame of the page: settings, the demo notice, and moving between pages (layer 5)."""

from __future__ import annotations

import importlib
from typing import Sequence

import streamlit as st

from phantomlab import __version__
from phantomlab.errors import InputError
from phantomlab.ui.plain_text import code_span, plain
from phantomlab.ui.workspace import Workspace, environment, resolve_workspace

__all__ = ["PAGES", "main"]

#: The pages, in the order the side bar lists them: plain name -> module with show(workspace).
PAGES: dict[str, str] = {
    "Design a phantom": "phantomlab.ui.design_page",
    "Stock shelf": "phantomlab.ui.shelf_page",
    "Batch log": "phantomlab.ui.batches_page",
    "Fit and correct": "phantomlab.ui.refit_page",
}


def _workspace(argv: Sequence[str]) -> Workspace | None:
    try:
        return resolve_workspace(argv, environment())
    except InputError as exc:
        st.error(f"Cannot start: {plain(exc)}")
        return None


def _side_bar(workspace: Workspace) -> str:
    with st.sidebar:
        st.title("phantomlab")
        st.caption("Design, mix, log and correct tissue-simulating optical phantoms.")
        page = st.radio("Go to", list(PAGES), key="page")
        st.divider()
        if workspace.is_demo:
            st.markdown("**Database:** demo (invented lab)")
            st.caption(f"`{workspace.demo_file}`")
        else:
            st.markdown("**Database:** your lab's")
            st.caption(f"`{_hide_password(workspace.database_url)}`")
        if workspace.shelf_path is not None:
            st.caption(f"Stock file: {code_span(workspace.shelf_path.name)}")
        else:
            st.caption("Stock file: none given (`--shelf STOCKS.toml`)")
        st.caption(f"phantomlab {__version__}")
    return page


def _hide_password(url: str) -> str:
    if "@" in url and "://" in url:
        scheme, rest = url.split("://", 1)
        credentials, host = rest.rsplit("@", 1)
        user = credentials.split(":", 1)[0]
        return f"{scheme}://{user}:***@{host}"
    return url


def _demo_notice(workspace: Workspace) -> None:
    st.info(
        "**Demo data.** This page runs on the demo database of an invented lab (the Kestrel "
        "Bay Optics Lab): its stocks, lots, batches and measurements are made up. Start the "
        "page with `--db URL` or `PHANTOMLAB_DB` to work on your own lab's database, which "
        "never receives demo data.",
        icon="ℹ️",
    )


def _keep_widget_state() -> None:
    """Keep the values of the pages' fields while another page is shown.

    Streamlit forgets the state of a widget that a run does not draw; writing the value back
    at the top of the run keeps it (the documented way for pages drawn one at a time).
    """
    for module_name in PAGES.values():
        module = importlib.import_module(module_name)
        for key in getattr(module, "KEEP", ()):
            if key in st.session_state:
                st.session_state[key] = st.session_state[key]
        prefixes = tuple(getattr(module, "KEEP_PREFIXES", ()))
        if prefixes:  # fields whose key carries a kind or a measurement ID
            for key in [k for k in st.session_state if isinstance(k, str) and k.startswith(prefixes)]:
                st.session_state[key] = st.session_state[key]


def main(argv: Sequence[str]) -> None:
    """Draw the page the side bar selects."""
    st.set_page_config(page_title="phantomlab", layout="wide")
    workspace = _workspace(argv)
    if workspace is None:
        return
    _keep_widget_state()
    page = _side_bar(workspace)
    if workspace.is_demo:
        from phantomlab.ui.demo import ensure_demo_database

        ready = ensure_demo_database(workspace)
        if not ready.ok:
            st.error(ready.error)
            return
        _demo_notice(workspace)
    module = importlib.import_module(PAGES[page])
    module.show(workspace)
