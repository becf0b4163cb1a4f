"""The command line starts without the heavy layers, and the lazily loaded names stay importable.

``phantomlab --help`` (and ``phantomlab COMMAND --help``) builds the whole parser: registering
the commands must not load scipy, numba or the fits (they took about 2 s of a 2.3 s start);
the package ``__init__`` files load their public names on first use (PEP 562 module
``__getattr__``).  Checked in fresh interpreters, so that what the other tests already
imported does not hide a module that registration loads.  The references are the defining
sub-modules themselves: each public name must be the very object they define.
"""

from __future__ import annotations

import os
import subprocess
import sys

import pytest


def _run(script: str) -> str:
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=300,
                          env={**os.environ, "OPENBLAS_NUM_THREADS": "1"})
    assert done.returncode == 0, done.stderr[-2000:]
    return done.stdout.strip()


def test_building_the_parser_loads_no_heavy_module():
    loaded = _run("""
import sys
from phantomlab.cli import build_parser
build_parser()
heavy = ("scipy", "numba", "pandas", "sqlalchemy", "streamlit", "phantomlab.calibration.fit_file",
         "phantomlab.calibration.baseline_cache", "phantomlab.transport", "phantomlab.workflows",
         "phantomlab.recipe", "phantomlab.store", "phantomlab.optics", "phantomlab.materials.stock")
print(",".join(sorted(m for m in sys.modules if m.startswith(heavy))))
""")
    assert loaded == ""


def test_help_of_every_command_still_prints():
    out = _run("""
import argparse, contextlib, io
from phantomlab.cli import build_parser, main
(actions,) = [a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction)]
assert len(actions.choices) >= 13
for name in actions.choices:
    buffer = io.StringIO()
    with contextlib.redirect_stdout(buffer):
        try:
            main([name, "--help"])
        except SystemExit as exc:
            assert exc.code == 0, (name, exc.code)
    assert "usage: phantomlab " + name in buffer.getvalue(), name
print("ok")
""")
    assert out == "ok"


@pytest.mark.parametrize("package", ["phantomlab.calibration", "phantomlab.materials"])
def test_every_public_name_is_the_defining_modules_object(package):
    out = _run(f"""
import importlib
package = importlib.import_module({package!r})
for name in package.__all__:
    value = getattr(package, name)
    source = importlib.import_module(getattr(value, "__module__", None) or package.__name__)
    defined = getattr(source, name, None) if source.__name__.startswith(package.__name__ + ".") else None
    if defined is None:  # a constant: find the sub-module that names it
        defined = getattr(importlib.import_module(package.__name__ + "." + package._SOURCES[name]), name)
    assert value is defined, name
namespace = {{}}
exec("from " + package.__name__ + " import *", namespace)
assert set(package.__all__) <= set(namespace), set(package.__all__) - set(namespace)
print("ok")
""")
    assert out == "ok"


def test_a_name_shared_with_its_sub_module_stays_the_function():
    # refractive_index is a function of the sub-module of the same name: loading the
    # sub-module first must not shadow it (the import system binds a sub-module on its parent)
    out = _run("""
import phantomlab.materials.refractive_index
import phantomlab.materials.stock
from phantomlab.materials import refractive_index, stock
import phantomlab.calibration.baseline_cache
from phantomlab.calibration import baseline_cache, fit_measurement_file
print(callable(refractive_index), type(stock).__name__, type(baseline_cache).__name__,
      fit_measurement_file.__module__)
""")
    assert out == "True module module phantomlab.calibration.fit_file"


def test_names_handed_on_without_loading_their_module():
    from phantomlab import workflows
    from phantomlab.calibration import baseline_cache
    from phantomlab.commands import _baseline_options
    from phantomlab.commands.batch import parse_amounts_csv, tolerance_alarms

    assert parse_amounts_csv is workflows.parse_amounts_csv
    assert tolerance_alarms is workflows.tolerance_alarms
    # the help text's copy of the cache folder's variable is the cache's own
    assert _baseline_options.BASELINE_DIR_ENV == baseline_cache.BASELINE_DIR_ENV
