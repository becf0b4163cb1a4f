"""Long Monte Carlo runs: chunked launches (progress, Ctrl-C) that leave the numbers unchanged."""

import io
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from phantomlab.cli import main
from phantomlab.commands.forward_mc import MonteCarloProgress
from phantomlab.transport.montecarlo import simulate

SIMULATE = sys.modules["phantomlab.transport.montecarlo.simulate"]
CASE = dict(mua_per_mm=0.1, mus_per_mm=10.0, g=0.8, n=1.4, rho_mm=np.arange(1.0, 5.0), seed=3)


def test_chunking_changes_no_tally_and_reports_progress(monkeypatch):
    whole = simulate(**CASE, photons=3200)
    monkeypatch.setattr(SIMULATE, "CHUNK_PHOTONS_PER_BATCH", 7)
    seen = []
    parts = simulate(**CASE, photons=3200, progress=lambda done, total: seen.append((done, total)))
    # every batch continues its own stream: the same photons, the same tallies
    assert parts.diffuse_reflectance == whole.diffuse_reflectance
    assert parts.interactions == whole.interactions
    np.testing.assert_array_equal(parts.reflectance_per_mm2, whole.reflectance_per_mm2)
    # the absorbed tally is summed per chunk: equal to rounding
    assert parts.absorbed_fraction == pytest.approx(whole.absorbed_fraction, abs=1e-12)
    assert len(seen) == 15 and seen[-1] == (3200, 3200)
    assert [d for d, _ in seen] == sorted(d for d, _ in seen)


def test_progress_lines_go_to_stderr_only():
    stream = io.StringIO()
    shown = MonteCarloProgress(total=1000, stream=stream, after_s=0.0)
    report = shown.entry(0, 1000)
    for done in range(100, 1001, 50):
        report(done, 1000)
    shown.close()
    lines = stream.getvalue().splitlines()
    assert lines[0].startswith("Monte Carlo:  10 % of 1,000 photons")
    assert lines[-1].startswith("Monte Carlo: 100 %")
    assert len(lines) == 10  # every ten per cent, not every call


def test_quiet_when_short(capsys):
    assert main(["forward", "--kind", "mc", "--mua-per-mm", "0.1", "--mus-per-mm", "10", "--g", "0.8",
                 "--n", "1.4", "--photons", "2000", "--json"]) == 0
    assert capsys.readouterr().err == ""


def test_ctrl_c_stops_a_long_run_with_one_line(tmp_path):
    code = ("import signal; signal.signal(signal.SIGINT, signal.default_int_handler)\n"
            "import sys; from phantomlab.cli import entry_point\n"
            "sys.argv = ['phantomlab', 'forward', '--kind', 'mc', '--mua-per-mm', '0.01', '--mus-per-mm', '10',"
            " '--g', '0.9', '--n', '1.4', '--photons', '50000000', '--json']\n"
            "entry_point()\n")
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    process = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                               env=env, cwd=tmp_path)
    time.sleep(6.0)  # imports and (cached) compilation, then simulating
    process.send_signal(signal.SIGINT)
    started = time.monotonic()
    out, err = process.communicate(timeout=60)
    assert time.monotonic() - started < 30  # stops between chunks, not at the end of the run
    assert process.returncode == 130
    assert out == b""  # no half JSON
    assert b"Traceback" not in err
    assert err.decode().strip().splitlines()[-1] == "phantomlab: interrupted; nothing was written"
    assert list(tmp_path.iterdir()) == []
