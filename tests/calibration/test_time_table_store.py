"""The td/fd lookup table kept beside a cached time baseline (time_table_store.py).

The kept table must give the lookup exactly the numbers the photons give (a cache may make a
fit faster, never different), and must not be served when it could be stale: made by other
code, from other photons, or damaged.  The baseline is the stored test baseline
(``fixtures/mc_baseline.npz``, 2.5 million photons).
"""

from __future__ import annotations

import shutil

import numpy as np
import pytest

from phantomlab.calibration import baseline_cache, time_table_store
from phantomlab.calibration.mc_lookup_time import TimeResolvedLookup
from phantomlab.calibration.time_table_store import read_time_table, tabulate_time_baseline, time_table_path
from phantomlab.transport.montecarlo import load_baseline, load_baseline_inputs
import td_fixture_data as fixture

BASELINE = fixture.FIXTURES / "mc_baseline.npz"
NAME = baseline_cache.time_cache_file_name(g=0.8, n=1.4)


@pytest.fixture(scope="module")
def photons():
    return load_baseline(BASELINE)


@pytest.fixture(scope="module")
def kept(tmp_path_factory, photons):
    """A cache folder holding the baseline and the table written beside it."""
    folder = tmp_path_factory.mktemp("time-table")
    shutil.copy2(BASELINE, folder / NAME)
    tabulate_time_baseline(photons, folder / NAME)
    return folder


def _copy(kept, tmp_path):
    for path in kept.iterdir():
        shutil.copy2(path, tmp_path / path.name)
    return tmp_path / NAME


def test_the_kept_table_gives_the_lookup_the_photons_numbers_to_the_bit(kept, photons):
    tabulated = read_time_table(kept / NAME, load_baseline_inputs(kept / NAME))
    assert tabulated is not None and tabulated.photons == photons.photons and tabulated.g == photons.g
    from_disk, from_photons = TimeResolvedLookup(tabulated), TimeResolvedLookup(photons)
    time_ps = np.linspace(50.0, 4000.0, 300)
    times = np.broadcast_to(time_ps, (2, time_ps.size))
    for rho in (5.0, 12.0, 20.0):
        a, b = (lookup.curves(mua_per_mm=[0.01, 0.001], mus_per_mm=[5.0, 8.0], rho_mm=[rho, rho], time_ps=times)
                for lookup in (from_disk, from_photons))
        assert np.any(a > 0) and np.array_equal(a, b)
    for name in ("_log_sd", "_log_bias", "_fine_log_f", "counts"):
        assert np.array_equal(getattr(from_disk, name), getattr(from_photons, name)), name
    assert (from_disk.tau_max, from_disk.u_max) == (from_photons.tau_max, from_photons.u_max)


def test_a_table_of_other_code_other_photons_or_damaged_is_not_served(kept, tmp_path, monkeypatch):
    path = _copy(kept, tmp_path)
    inputs = load_baseline_inputs(path)
    assert read_time_table(path, inputs) is not None
    assert read_time_table(path, {**inputs, "seed": inputs["seed"] + 1}) is None  # other photons
    assert read_time_table(path, {**inputs, "photons": inputs["photons"] * 2}) is None
    with monkeypatch.context() as patch:  # the table's code changed since it was written
        patch.setattr(time_table_store, "table_code_key", lambda: "0" * 64)
        assert read_time_table(path, inputs) is None
    with open(path, "ab") as stream:  # the baseline file beside it was replaced (another size)
        stream.write(b"\0")
    assert read_time_table(path, inputs) is None
    path = _copy(kept, tmp_path)
    table = time_table_path(path)
    table.write_bytes(table.read_bytes()[: table.stat().st_size // 2])  # cut short
    assert read_time_table(path, inputs) is None
    table.write_bytes(b"not a table")
    assert read_time_table(path, inputs) is None


def test_the_code_key_follows_the_source_of_the_table_modules():
    key = time_table_store.table_code_key()
    assert len(key) == 64 and int(key, 16) >= 0
    assert "calibration/mc_lookup_time_table.py" in time_table_store._CODE_SOURCES
    assert "transport/time_domain.py" in time_table_store._CODE_SOURCES  # the diffusion control


def test_the_cache_reads_photons_once_then_only_the_table(kept, tmp_path, monkeypatch, photons):
    path = _copy(kept, tmp_path)
    time_table_path(path).unlink()
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # fewer photons than a new cache file gets: said elsewhere
        first = baseline_cache.obtain_photon_baseline(g=0.8, n=1.4, folder=tmp_path)
        assert time_table_path(path).is_file() and not first.built
        monkeypatch.setattr(baseline_cache, "_read_photons", lambda *a, **k: pytest.fail("the photons were read again"))
        second = baseline_cache.obtain_photon_baseline(g=0.8, n=1.4, folder=tmp_path)
    assert second.baseline.photons == photons.photons
    assert np.array_equal(second.baseline.time_table.log_f, first.baseline.time_table.log_f)
    listed = {row["file"]: row for row in baseline_cache.list_cached(tmp_path)}
    assert listed[str(path)]["lookup_table"] is True and str(time_table_path(path)) not in listed
    removed = {row["file"] for row in baseline_cache.clear_cached(tmp_path)}
    assert {str(path), str(time_table_path(path))} <= removed


def test_a_cache_that_cannot_be_written_still_serves_without_a_kept_table(kept, tmp_path, monkeypatch):
    shutil.copy2(kept / NAME, tmp_path / NAME)

    def refuse(*_):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(time_table_store, "_write", refuse)
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        found = baseline_cache.obtain_photon_baseline(g=0.8, n=1.4, folder=tmp_path)
    assert found.baseline.time_table.log_f.shape[0] > 10
    assert not time_table_path(tmp_path / NAME).is_file()
