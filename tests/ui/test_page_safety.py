"""The page treats what a person hands over as data: an upload is never a server path, and
typed text (recipe name, operator, lot) is shown as typed, never rendered as markdown."""

from __future__ import annotations

from pathlib import Path

import pytest

from phantomlab.recipe import load_recipe, solve
from phantomlab.ui.plain_text import code_span, plain

REPO_ROOT = Path(__file__).resolve().parents[2]
DEMO_RECIPE = REPO_ROOT / "recipes" / "demo-nir-liquid.toml"
SERVER_FILE = REPO_ROOT / "recipes" / "measurements" / "demo-nir-liquid-srdr.csv"
IMAGE = "![pixel](http://198.51.100.7/pixel.png)"  # a documentation address (RFC 5737)

MARKDOWN_KINDS = ("title", "header", "subheader", "markdown", "caption", "info", "success", "warning", "error")


def _rendered(app) -> list[str]:
    return [str(element.value) for kind in MARKDOWN_KINDS for element in getattr(app, kind)]


@pytest.mark.parametrize("text", [IMAGE, "[link](javascript:alert(1))", "<img src=x>", "**bold** _em_ `code`",
                                  ":red[colour] $x^2$ # heading | cell ~strike~"])
def test_plain_leaves_no_markdown_construct(text):
    shown = plain(text)
    for construct in ("![", "](", "[l", "<img", "**", " _em", "`code", ":red[", "$x", "# h", "~s"):
        if construct in text:
            assert construct not in shown.replace("\\" + construct[0], ""), (construct, shown)
    assert plain("ink_black and snake_case_keys") == "ink_black and snake_case_keys"
    # bare addresses are made links after parsing: an invisible joiner keeps them text
    shown = plain("see http://198.51.100.7/x and www.example.org")
    assert "://" not in shown and "www." not in shown
    assert shown.replace("\u2060", "") == "see http://198.51.100.7/x and www.example.org"
    assert code_span("a`b") == "`a'b`"


def test_an_uploaded_file_naming_a_server_file_is_not_read_from_the_server(page, go_to):
    refit = go_to(page, "Fit and correct")
    refit.selectbox(key="refit.measurement").set_value("(upload a file, not stored)").run()
    refit.selectbox(key="refit.upload_kind").set_value("srdr").run()
    upload = str(SERVER_FILE).encode()  # one line: a path on the server, which exists
    refit.file_uploader(key="refit.upload").set_value(("path.csv", upload, "text/csv")).run()
    assert not refit.exception
    errors = " ".join(e.value for e in refit.error)
    assert "header lacks column wavelength_nm" in errors  # read as CSV text, and refused
    assert not [c for c in refit.get("plotly_chart") if not str(c.key).startswith("correct.")]  # no fit shown


def test_typed_text_is_shown_as_text_not_markdown(page, go_to, demo_file):
    from phantomlab.store import open_store
    from phantomlab.ui.recording import record_planned_batch

    store = open_store(f"sqlite:///{demo_file}")
    try:
        code = record_planned_batch(store, solve(load_recipe(DEMO_RECIPE)), operator=IMAGE)
    finally:
        store.close()
    app = go_to(page, "Batch log")
    app.selectbox(key="batches.open").set_value(code).run()
    assert not app.exception
    shown = _rendered(app)
    assert any("pixel" in text for text in shown)  # the operator is shown ...
    assert not any("![pixel](" in text for text in shown)  # ... but never as an image
