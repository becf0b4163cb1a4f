"""The command line runs numpy's BLAS on one thread unless the user sets another count.

Small matrices (adding-doubling streams, fits batched over wavelengths) run 2-4x slower with
two BLAS threads fighting over two cores (bench/slab_fit.py; docs/design.md "Threads").
"""

import os
import subprocess
import sys

import pytest

PROBE = "import os, phantomlab.cli; print(os.environ.get('OPENBLAS_NUM_THREADS'))"


@pytest.mark.parametrize("given, expected", [(None, "1"), ("2", "2")])
def test_the_command_line_sets_one_blas_thread_unless_told(given, expected):
    env = {key: value for key, value in os.environ.items() if key != "OPENBLAS_NUM_THREADS"}
    if given is not None:
        env["OPENBLAS_NUM_THREADS"] = given
    printed = subprocess.run([sys.executable, "-c", PROBE], env=env, capture_output=True, text=True,
                             check=True).stdout.strip()
    assert printed == expected
