"""Suite-wide set-up: the default fits' Monte Carlo baselines come from a stored test cache.

The default srdr/sfdi fit builds a million-photon baseline into the user's cache when it has
none (a minute or more).  The suite never does that: ``PHANTOMLAB_BASELINE_DIR`` points
every test (and every command the tests start) at a session copy of
``tests/calibration/fixtures/baseline-cache/`` (lookup tables of the baselines the tests
need, made by ``make_default_fit_fixtures.py baselines``), and a build inside the test
process fails the test, naming the (g, n, n_outside) whose table is missing.  A test that
means to build (with few photons) marks itself ``builds_baseline``.
"""

import os
import shutil
from pathlib import Path

import pytest

FIXTURE_CACHE = Path(__file__).parent / "calibration" / "fixtures" / "baseline-cache"


@pytest.fixture(scope="session", autouse=True)
def baseline_cache_dir(tmp_path_factory):
    """A writable copy of the stored test cache, named by PHANTOMLAB_BASELINE_DIR for the session."""
    folder = tmp_path_factory.mktemp("baseline-cache")
    for path in sorted(FIXTURE_CACHE.glob("*.npz")):
        shutil.copy2(path, folder / path.name)
    # the td/fd default fit's baseline (photons, not a table) for g 0.8, n 1.4: the stored
    # 2.5-million-photon test baseline (make_mc_fixtures.py) stands in for the cache's own build
    shutil.copy2(FIXTURE_CACHE.parent / "mc_baseline.npz", folder / "baseline-g0.80-n1.400-out1.000-time.npz")
    previous = os.environ.get("PHANTOMLAB_BASELINE_DIR")
    os.environ["PHANTOMLAB_BASELINE_DIR"] = str(folder)
    yield folder
    if previous is None:
        os.environ.pop("PHANTOMLAB_BASELINE_DIR", None)
    else:
        os.environ["PHANTOMLAB_BASELINE_DIR"] = previous


@pytest.fixture(autouse=True)
def no_baseline_builds(request, monkeypatch):
    """Fail a test whose default fit would build a baseline (its table is missing from the test cache)."""
    if request.node.get_closest_marker("builds_baseline"):
        return
    from phantomlab.calibration import baseline_cache

    def refuse(*, g, n, n_outside=1.0, **_):
        name = baseline_cache.cache_file_name(g=g, n=n, n_outside=n_outside)
        raise AssertionError(f"this test would build the Monte Carlo baseline {name}: add its lookup table to "
                             f"{FIXTURE_CACHE} (make_default_fit_fixtures.py baselines), or fit with a diffusion "
                             f"model, or mark the test builds_baseline")

    monkeypatch.setattr(baseline_cache, "build_cached_baseline", refuse)
    monkeypatch.setattr(baseline_cache, "build_baseline", refuse, raising=False)
