"""The per-user cache of Monte Carlo baselines the default fits use (baseline_cache.py, commands).

Interface tests: where the cache is, that a baseline is built once and then read, that a
damaged, foreign or mislabelled file is refused in one line and replaced only on request,
that a folder that cannot be written is named with its override, that a stopped build
leaves nothing, and ``phantomlab baseline list|clear``.  Builds here use 20,000 photons
(the cache's million is for real fits).
"""

import json
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from phantomlab.calibration import baseline_cache
from phantomlab.errors import InputError

SMALL = 20_000


@pytest.fixture
def small_builds(monkeypatch, tmp_path):
    monkeypatch.setattr(baseline_cache, "CACHE_PHOTONS", SMALL)
    monkeypatch.setenv(baseline_cache.BASELINE_DIR_ENV, str(tmp_path / "cache"))
    return tmp_path / "cache"


def test_the_folder_is_the_option_else_the_environment_else_the_user_cache(monkeypatch, tmp_path):
    import platformdirs

    monkeypatch.setenv(baseline_cache.BASELINE_DIR_ENV, str(tmp_path / "env"))
    assert baseline_cache.baseline_folder(tmp_path / "option") == tmp_path / "option"
    assert baseline_cache.baseline_folder() == tmp_path / "env"
    monkeypatch.delenv(baseline_cache.BASELINE_DIR_ENV)
    assert baseline_cache.baseline_folder() == \
        baseline_cache.Path(platformdirs.user_cache_dir("phantomlab", appauthor=False)) / "baselines"


def test_one_file_per_rounded_g_and_indices_and_their_ranges():
    assert baseline_cache.cache_file_name(g=0.8049, n=1.4, n_outside=1.0) == "baseline-g0.80-n1.400-out1.000.npz"
    settings = baseline_cache.cache_settings(g=0.9, n=1.33)
    # the reference ratio answers mus'/mua up to 1500 at every g
    assert (1 - 0.9) * settings["mus_per_mm"] / settings["mua_per_mm"] == pytest.approx(1500.0)
    for bad in ({"g": 0.97, "n": 1.4}, {"g": -0.1, "n": 1.4}, {"g": 0.8, "n": 0.9}, {"g": 0.8, "n": float("nan")}):
        with pytest.raises(InputError, match="accepted: a number from"):
            baseline_cache.cache_settings(**bad)


@pytest.mark.builds_baseline
def test_built_once_then_read_listed_and_cleared(small_builds):
    first = baseline_cache.obtain_baseline(g=0.8, n=1.4)
    assert first.built and first.path.is_file() and baseline_cache.table_path(first.path).is_file()
    again = baseline_cache.obtain_baseline(g=0.8, n=1.4)
    assert not again.built and again.path == first.path
    assert np.allclose(again.baseline.lookup.table_log, first.baseline.lookup.table_log)
    rows = baseline_cache.list_cached()
    assert [(r["g"], r["n"], r["photons"], r["usable"], r["lookup_table"]) for r in rows] == [(0.8, 1.4, SMALL, True, True)]
    removed = baseline_cache.clear_cached()
    assert len(removed) == 2 and not list(small_builds.iterdir())


@pytest.mark.builds_baseline
def test_refused_files_are_replaced_only_on_request(small_builds):
    built = baseline_cache.obtain_baseline(g=0.8, n=1.4)
    good = built.path.read_bytes()
    baseline_cache.table_path(built.path).unlink()  # the photons file decides
    # damaged
    built.path.write_bytes(b"PK\x03\x04 damaged")
    with pytest.raises(baseline_cache.CachedBaselineError) as refused:
        baseline_cache.obtain_baseline(g=0.8, n=1.4)
    message = str(refused.value)
    assert "\n" not in message and built.path.name in message and "--rebuild" in message
    assert built.path.read_bytes() == b"PK\x03\x04 damaged"  # not replaced
    # another format version
    built.path.write_bytes(good)
    with np.load(built.path) as data:
        contents = {k: data[k] for k in data.files}
    header = json.loads(str(contents["inputs_json"]))
    header["version"] = 99
    contents["inputs_json"] = np.array(json.dumps(header))
    with open(built.path, "wb") as stream:
        np.savez_compressed(stream, **contents)
    with pytest.raises(baseline_cache.CachedBaselineError, match="version 99"):
        baseline_cache.obtain_baseline(g=0.8, n=1.4)
    # made for other indices than its name says
    other = small_builds / baseline_cache.cache_file_name(g=0.8, n=1.33)
    other.write_bytes(good)
    with pytest.raises(baseline_cache.CachedBaselineError, match="made for n = 1.4"):
        baseline_cache.obtain_baseline(g=0.8, n=1.33)
    listed = {r["file"]: r["usable"] for r in baseline_cache.list_cached()}
    assert listed[str(other)] == "made for other inputs than its name says"
    rebuilt = baseline_cache.obtain_baseline(g=0.8, n=1.33, rebuild=True)
    assert rebuilt.built and abs(rebuilt.baseline.n - 1.33) < 1e-9


def test_a_folder_that_cannot_be_written_is_named_with_its_override(tmp_path):
    blocked = tmp_path / "a-file"
    blocked.write_text("not a folder")
    for folder in (blocked, blocked / "below"):
        with pytest.raises(InputError) as refused:
            baseline_cache.obtain_baseline(g=0.8, n=1.4, folder=folder)
        message = str(refused.value)
        assert str(folder) in message and "--baseline-dir" in message and baseline_cache.BASELINE_DIR_ENV in message


@pytest.mark.builds_baseline
def test_a_stopped_build_writes_nothing(small_builds):
    seen = []

    def stop(done, total):
        seen.append(done)
        if done > 0:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        baseline_cache.obtain_baseline(g=0.8, n=1.4, progress=stop)
    assert seen[0] == 0 and 0 < seen[-1] < SMALL
    assert not small_builds.exists() or not list(small_builds.iterdir())


@pytest.mark.builds_baseline
def test_the_command_line_builds_with_a_progress_bar_lists_and_clears(small_builds, tmp_path, capsys):
    from phantomlab.cli import main

    probe = tmp_path / "probe.csv"
    rho = np.geomspace(1.0, 8.0, 12)
    from phantomlab.transport.diffusion import srdr_reflectance

    R = srdr_reflectance(mua_per_mm=0.01, musp_per_mm=1.0, rho_mm=rho, n=1.4)
    probe.write_text("wavelength_nm,rho_mm,reflectance_per_mm2,sd\n"
                     + "".join(f"700,{r:.5g},{v:.6g},{0.01 * v:.4g}\n" for r, v in zip(rho, R)))
    assert main(["fit", str(probe), "--kind", "srdr", "--n", "1.4", "--json"]) == 0
    captured = capsys.readouterr()
    payload = json.loads(captured.out)  # stdout holds the one JSON object only
    assert payload["baseline_origin"] == "cache (built now)" and payload["g_origin"] == "default"
    assert "100 %" in captured.err and "photons" in captured.err
    assert main(["baseline", "list", "--json"]) == 0
    listed = json.loads(capsys.readouterr().out)
    assert [b["file"] for b in listed["baselines"]] == [payload["baseline"]]
    # the total counts the lookup table kept beside the baseline, and the text says it is there
    table_mb = baseline_cache.table_path(baseline_cache.Path(payload["baseline"])).stat().st_size / 1e6
    assert listed["baselines"][0]["lookup_table"] is True
    assert listed["megabytes"] == pytest.approx(listed["baselines"][0]["megabytes"] + table_mb, abs=2e-3)
    assert main(["baseline", "list"]) == 0
    text = capsys.readouterr().out
    assert "baseline-g0.80-n1.400-out1.000.npz" in text and "its lookup table beside it" in text
    # a damaged cache file: refused in one line, rebuilt with --rebuild
    with open(payload["baseline"], "wb") as stream:
        stream.write(b"damaged")
    baseline_cache.table_path(baseline_cache.Path(payload["baseline"])).unlink()
    assert main(["fit", str(probe), "--kind", "srdr", "--n", "1.4"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--rebuild" in err
    assert main(["fit", str(probe), "--kind", "srdr", "--n", "1.4", "--rebuild", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["baseline_origin"] == "cache (built now)"
    assert main(["baseline", "clear", "--json"]) == 0
    assert len(json.loads(capsys.readouterr().out)["removed"]) == 2


@pytest.mark.builds_baseline
def test_ctrl_c_stops_the_build_cleanly(tmp_path):
    probe = tmp_path / "probe.csv"
    probe.write_text("wavelength_nm,rho_mm,reflectance_per_mm2\n" + "".join(
        f"700,{r},{0.01 / r**3:.5g}\n" for r in (1, 2, 3, 4, 5, 6)))
    cache = tmp_path / "cache"
    script = ("import sys; import phantomlab.calibration.baseline_cache as c; c.CACHE_PHOTONS = 3_000_000; "
              "from phantomlab.cli import main; sys.exit(main(sys.argv[1:]))")
    env = dict(os.environ, PHANTOMLAB_BASELINE_DIR=str(cache))
    child = subprocess.Popen([sys.executable, "-c", script, "fit", str(probe), "--kind", "srdr", "--n", "1.4"],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env, text=True)
    try:
        line = child.stderr.readline()  # the bar's title: the build has started
        assert "building" in line
        child.stderr.readline()  # its first step
        time.sleep(0.5)
        child.send_signal(signal.SIGINT)
        try:
            out, err = child.communicate(timeout=30)
        except subprocess.TimeoutExpired:  # a press lost before Python saw it: a person presses again
            child.send_signal(signal.SIGINT)
            out, err = child.communicate(timeout=120)
    finally:
        if child.poll() is None:
            child.kill()
    assert child.returncode == 130, err
    assert err.strip().splitlines()[-1] == "phantomlab: interrupted; nothing was written"
    assert not [p for p in cache.iterdir() if p.is_file()] if cache.exists() else True


def test_a_cached_time_baseline_with_fewer_photons_than_today_is_used_with_a_warning(baseline_cache_dir):
    """The session cache's td/fd file is the stored 2.5-million-photon test baseline (tests/conftest.py).

    A user's file made before the count was raised (3 million) is read, not rebuilt behind
    their back, and the warning names its photons and ``--rebuild``.
    """
    from phantomlab.errors import PhantomlabWarning

    assert baseline_cache.TIME_CACHE_PHOTONS > 2_500_000
    with pytest.warns(PhantomlabWarning, match=r"holds 2,500,000 photons, fewer than .* --rebuild"):
        found = baseline_cache.obtain_photon_baseline(g=0.8, n=1.4, folder=baseline_cache_dir)
    assert not found.built and found.baseline.photons == 2_500_000


def test_a_ctrl_c_lost_on_the_way_stops_the_build_at_the_bar_s_next_step():
    """Ctrl-C's KeyboardInterrupt can be lost inside compiled code (seen once: the build ran on to
    the end); the progress bar remembers the press and raises it again at its next step."""
    import io

    from phantomlab.commands._baseline_options import ProgressBar

    before = signal.getsignal(signal.SIGINT)
    bar = ProgressBar(io.StringIO())
    try:
        bar(0, 10)
        try:
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(0.1)  # the handler runs here; its KeyboardInterrupt is "lost" below
        except KeyboardInterrupt:
            pass
        with pytest.raises(KeyboardInterrupt):
            bar(5, 10)
        assert signal.getsignal(signal.SIGINT) is before  # the handler the bar found is back
    finally:
        signal.signal(signal.SIGINT, before)
