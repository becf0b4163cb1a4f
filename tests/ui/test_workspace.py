"""Which database the page opens: a lab's own database never becomes the demo database.

Checked against the issue's rule (issue 7, item 6): ``--db`` or ``PHANTOMLAB_DB`` name the lab's
database and the page must not seed demo data into it; with neither, the page uses a demo
database file of its own.
"""

from pathlib import Path

import pytest

from phantomlab.errors import InputError
from phantomlab.ui.workspace import DEMO_DATABASE, DEMO_SHELF, resolve_workspace


def test_no_database_given_means_the_demo_file():
    workspace = resolve_workspace([], {})
    assert workspace.is_demo
    assert workspace.demo_file == DEMO_DATABASE
    assert workspace.database_url == f"sqlite:///{DEMO_DATABASE}"
    assert workspace.shelf_path == DEMO_SHELF


@pytest.fixture
def lab_shelf(tmp_path):
    shelf = tmp_path / "stocks.toml"
    shelf.write_text(DEMO_SHELF.read_text(encoding="utf-8"), encoding="utf-8")
    return str(shelf)


def test_db_option_is_the_labs_database_not_the_demo(lab_shelf):
    workspace = resolve_workspace(["--db", "sqlite:////tmp/lab.sqlite", "--shelf", lab_shelf], {})
    assert not workspace.is_demo
    assert workspace.database_url == "sqlite:////tmp/lab.sqlite"
    assert workspace.demo_file is None
    assert str(workspace.shelf_path) == lab_shelf


def test_environment_variable_is_the_labs_database(lab_shelf):
    workspace = resolve_workspace([], {"PHANTOMLAB_DB": "postgresql://u@h/lab", "PHANTOMLAB_SHELF": lab_shelf})
    assert not workspace.is_demo
    assert workspace.database_url == "postgresql://u@h/lab"


def test_option_wins_over_environment(lab_shelf):
    workspace = resolve_workspace(["--db", "sqlite:///a.sqlite"],
                                  {"PHANTOMLAB_DB": "sqlite:///b", "PHANTOMLAB_SHELF": lab_shelf})
    assert workspace.database_url == "sqlite:///a.sqlite"


def test_a_lab_database_without_its_stock_file_gets_no_shelf_not_the_demo_one():
    """Else the demo shelf would reach the lab's database through the first saved batch."""
    from phantomlab.ui.workspace import NO_SHELF, require_shelf

    workspace = resolve_workspace(["--db", "sqlite:///lab.sqlite"], {})
    assert workspace.shelf_path is None and not workspace.is_demo
    with pytest.raises(InputError, match=r"no stock file given: start the page with --shelf"):
        require_shelf(workspace)
    assert "SHELF=STOCKS.toml" in NO_SHELF


def test_demo_file_can_be_moved_for_tests(tmp_path):
    target = tmp_path / "demo.sqlite"
    workspace = resolve_workspace([], {"PHANTOMLAB_DEMO_DB": str(target)})
    assert workspace.is_demo and workspace.demo_file == target.resolve()


def test_demo_file_setting_is_ignored_when_a_lab_database_is_given(tmp_path, lab_shelf):
    workspace = resolve_workspace(
        ["--db", "sqlite:///lab.sqlite", "--shelf", lab_shelf], {"PHANTOMLAB_DEMO_DB": str(tmp_path / "d.sqlite")}
    )
    assert not workspace.is_demo and workspace.database_url == "sqlite:///lab.sqlite"


def test_missing_stock_file_is_refused_in_one_line(tmp_path):
    with pytest.raises(InputError, match=r"stock file .*nope\.toml.* not found"):
        resolve_workspace(["--shelf", str(tmp_path / "nope.toml")], {})


def test_demo_data_folder_is_ignored_by_git():
    ignored = (Path(__file__).resolve().parents[2] / ".gitignore").read_text().splitlines()
    assert "/demo-data/" in ignored
