"""Monte Carlo baselines kept for the user: one per (g, n, n_outside), built on first need (layer 3).

The default srdr and sfdi fit is the Monte Carlo lookup, which needs a stored baseline
(:func:`phantomlab.transport.montecarlo.build_baseline`) made for the phantom's anisotropy g
and the indices n, n_outside.  This module finds it in a per-user cache folder, or builds it
once with the settings below and keeps it there:

* folder: the ``folder`` argument (``--baseline-dir``), else the environment variable
  ``PHANTOMLAB_BASELINE_DIR``, else ``baselines`` in the user's cache folder of the platform
  (platformdirs: ``~/.cache/phantomlab/baselines`` on Linux);
* one file per (g rounded to 0.01, n and n_outside rounded to 0.001):
  ``baseline-g0.80-n1.400-out1.000.npz``;
* settings (:data:`CACHE_PHOTONS` photons, reference μs :data:`CACHE_MUS_REF_PER_MM`, reference
  μa chosen so that μs′/μa up to :data:`CACHE_MAX_MUSP_OVER_MUA` is answered, seed
  :data:`CACHE_SEED`), the same for every g.  Its reach in distance is set by the photons
  and by the lookup's table (200 transport lengths, :mod:`phantomlab.calibration.mc_lookup`);
  the fit refuses the distances it cannot serve.

A cached file that is unreadable, of another format version, or made for other inputs than
its name says is refused (:class:`CachedBaselineError`, one line) and replaced only when the
caller asks (``rebuild=True``: ``--rebuild`` on the command line, the user's agreement on
the page).  A folder that cannot be written is refused with one line naming it and the
override.
"""

from __future__ import annotations

import os
import re
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.transport.montecarlo import build_baseline

__all__ = [
    "BASELINE_DIR_ENV", "CACHE_PHOTONS", "DEFAULT_G", "CachedBaseline", "CachedBaselineError",
    "baseline_folder", "cache_file_name", "find_cached_baseline", "obtain_baseline", "obtain_photon_baseline",
    "time_cache_file_name", "time_cache_settings", "TIME_CACHE_PHOTONS", "build_cached_baseline", "list_cached",
    "clear_cached", "cache_settings", "table_path",
]

#: Environment variable naming the cache folder (the ``--baseline-dir`` option wins over it).
BASELINE_DIR_ENV = "PHANTOMLAB_BASELINE_DIR"
#: Photons launched for a cached baseline: the lookup's own noise stays at or below about 1 %
#: out to 20–50 transport lengths at μs′/μa ≥ 30 (tests/calibration/test_mc_lookup.py).  A
#: build (g 0.8, n 1.4) is about 0.9 billion photon interactions: 72–79 CPU-seconds on the
#: project's two-core machine (1.15–1.3e7 interactions per CPU-second), so about 40 s on two
#: free cores and more on shared ones, plus 2 s for its table and file (bench/fit.py prints
#: these beside ``simulate`` of the same photons).
CACHE_PHOTONS = 1_000_000
#: Reference scattering of a cached baseline [1/mm] (the lookup scales it to every μs).
CACHE_MUS_REF_PER_MM = 10.0
#: Highest μs′/μa a cached baseline answers: the reference μa is μs_ref (1 − g)/1500.
#: 1.5 × the highest ratio of the acceptance cases (1000), so that a fitted μa near the truth
#: never reaches the floor; a lower floor makes every photon path, and the build, longer.
CACHE_MAX_MUSP_OVER_MUA = 1500.0
#: Master seed of every cached baseline.
CACHE_SEED = 20_251
#: Photons of the cached td/fd baseline (``NAME-time.npz``): the time-resolved lookup bins
#: every photon by distance *and* time, so it needs more than the srdr table.  Its photon
#: noise, not its settings, decides the td fit's accuracy (the engine is exactly scale
#: invariant; quarters of one baseline moved μs′ at μs′/μa = 30 by ±7 % and μa at 1000 by
#: ±4 % from each other, at 0.7 million photons each): 3 million left μs′ at μs′/μa = 30
#: −4 to −7 % and μa at 1000 −4 % off on independent Monte Carlo data
#: (tests/calibration/fixtures/mc_td_half_space.npz), 10 million −0.3 % and −2.1 % (the
#: quarters' spread scaled to 10 million: about 1.3 % and 1.1 %).  A build of 5–13 minutes
#: on two shared cores, 90 MB.
TIME_CACHE_PHOTONS = 10_000_000
#: Highest μs′/μa the td/fd baseline answers (its reference μa is μs_ref (1 − g)/3000): the
#: late photons of a weakly absorbing phantom are what a td fit window reaches.
TIME_CACHE_MAX_MUSP_OVER_MUA = 3000.0
#: Master seed of the td/fd baselines.
TIME_CACHE_SEED = 20_252
#: g assumed by a standalone fit without ``--g`` (common practice, no source: lipid
#: emulsions and polymer or oxide microspheres of 0.5–1 µm lie near 0.7–0.9 in the red and
#: near infrared).
DEFAULT_G = 0.8
#: Range of g a cached baseline is built for (beyond 0.95 the scatterings per transport
#: length, and so the build time, grow without bound).
G_RANGE = (0.0, 0.95)
#: Range of n and n_outside for a cached baseline.
INDEX_RANGE = (1.0, 2.0)

_NAME = re.compile(r"^baseline-g(\d\.\d\d)-n(\d\.\d\d\d)-out(\d\.\d\d\d)(?:-time)?\.npz$")
_TOLERANCE = 5e-4


class CachedBaselineError(InputError):
    """A cached baseline file that cannot be used; ``path`` names it, ``reason`` says why."""

    def __init__(self, path: Path, reason: str):
        self.path = Path(path)
        self.reason = reason
        super().__init__(f"cached baseline {self.path} cannot be used: {reason}; give --rebuild to build it again "
                         f"(about a minute)")


@dataclass(frozen=True, eq=False)
class CachedBaseline:
    """A baseline found or built in the cache.

    Attributes
    ----------
    baseline : phantomlab.transport.montecarlo.Baseline
    path : Path
        The cache file.
    built : bool
        True when it was built by this call (else read from the cache).
    seconds : float [s]
        Build time (0 when read).
    """

    baseline: object
    path: Path
    built: bool
    seconds: float = 0.0


def baseline_folder(folder=None) -> Path:
    """The cache folder: ``folder``, else ``$PHANTOMLAB_BASELINE_DIR``, else the platform's user cache.

    Returns
    -------
    Path
        Not created here (a read needs no folder; a build creates it).
    """
    if folder not in (None, ""):
        return Path(folder).expanduser()
    env = os.environ.get(BASELINE_DIR_ENV, "").strip()
    if env:
        return Path(env).expanduser()
    import platformdirs

    return Path(platformdirs.user_cache_dir("phantomlab", appauthor=False)) / "baselines"


def _check_range(name: str, value, low: float, high: float) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} = {value!r}; accepted: a number from {low:g} to {high:g}") from None
    if not np.isfinite(number) or not low <= number <= high:
        raise InputError(f"{name} = {value!r}; accepted: a number from {low:g} to {high:g} for a cached baseline")
    return number


def cache_settings(*, g, n, n_outside=1.0) -> dict:
    """The rounded (g, n, n_outside) and the build inputs of the cached baseline for them."""
    g = round(_check_range("g", g, *G_RANGE), 2)
    n = round(_check_range("n", n, *INDEX_RANGE), 3)
    n_outside = round(_check_range("n_outside", n_outside, *INDEX_RANGE), 3)
    return {"g": g, "n": n, "n_outside": n_outside,
            "mua_per_mm": CACHE_MUS_REF_PER_MM * (1.0 - g) / CACHE_MAX_MUSP_OVER_MUA,
            "mus_per_mm": CACHE_MUS_REF_PER_MM, "photons": CACHE_PHOTONS, "seed": CACHE_SEED}


def cache_file_name(*, g, n, n_outside=1.0) -> str:
    """``baseline-g0.80-n1.400-out1.000.npz`` for the rounded (g, n, n_outside)."""
    settings = cache_settings(g=g, n=n, n_outside=n_outside)
    return f"baseline-g{settings['g']:.2f}-n{settings['n']:.3f}-out{settings['n_outside']:.3f}.npz"


def _writable_folder(folder: Path) -> Path:
    hint = f"choose another with --baseline-dir FOLDER or the environment variable {BASELINE_DIR_ENV}"
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError:
        raise InputError(f"baseline cache folder {folder} cannot be created; {hint}") from None
    if not folder.is_dir() or not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"baseline cache folder {folder} is not writable; {hint}")
    return folder


def table_path(path: Path) -> Path:
    """The lookup table kept beside a cached baseline: ``NAME.lookup.npz``."""
    return path.with_name(path.name[: -len(".npz")] + ".lookup.npz")


def _check_made_for(path: Path, made: dict, settings: dict) -> None:
    other = [f"{key} = {float(made[key]):g}" for key in ("g", "n", "n_outside")
             if abs(float(made[key]) - settings[key]) > _TOLERANCE]
    if other:
        raise CachedBaselineError(path, f"it was made for {', '.join(other)}, its name says "
                                        f"g = {settings['g']:g}, n = {settings['n']:g}, "
                                        f"n_outside = {settings['n_outside']:g}")


def _reason(exc: InputError, path: Path) -> str:
    return str(exc).replace(repr(str(path)), "").strip(" :") or "unreadable"


def _read_photons(path: Path, settings: dict):
    from phantomlab.transport.montecarlo import load_baseline

    try:
        baseline = load_baseline(path)
    except InputError as exc:
        raise CachedBaselineError(path, _reason(exc, path)) from None
    _check_made_for(path, {"g": baseline.g, "n": baseline.n, "n_outside": baseline.n_outside}, settings)
    return baseline


def _read_table(path: Path, settings: dict):
    """The tabulated baseline beside ``path``, or None when there is none usable (made again then)."""
    from phantomlab.calibration.mc_lookup import SmoothLookup

    table = table_path(path)
    if not table.is_file():
        return None
    try:
        tabulated = SmoothLookup.load(table)
    except InputError:
        return None  # derived from the photons: made again from them
    if path.is_file():
        from phantomlab.transport.montecarlo import load_baseline_inputs

        try:
            inputs = load_baseline_inputs(path)
        except InputError as exc:
            raise CachedBaselineError(path, _reason(exc, path)) from None
        if any(abs(float(inputs[key]) - float(getattr(tabulated, key))) > 1e-12
               for key in ("g", "n", "n_outside", "mua_per_mm", "mus_per_mm", "photons", "seed")):
            return None  # the photons were replaced: tabulate them again
    _check_made_for(path, {"g": tabulated.g, "n": tabulated.n, "n_outside": tabulated.n_outside}, settings)
    return tabulated


def _tabulate(baseline, path: Path):
    """The baseline's lookup table, saved beside it when the folder allows (a cache of a cache)."""
    from phantomlab.calibration.mc_lookup import TabulatedBaseline

    tabulated = TabulatedBaseline.from_baseline(baseline)
    try:
        tabulated.lookup.save(table_path(path))
    except OSError:
        pass  # a read-only cache still serves; the table is made again next time
    return tabulated


def build_cached_baseline(*, g, n, n_outside=1.0, folder=None, progress=None, photons=None) -> CachedBaseline:
    """Build the cache's baseline for (g, n, n_outside), write it and its lookup table (replacing any).

    Parameters
    ----------
    g, n, n_outside : float
        Rounded to 0.01 and 0.001 (:func:`cache_settings`).
    folder : path, optional
        Cache folder (:func:`baseline_folder`).
    progress : callable, optional
        ``progress(done, total)`` [photons], see :func:`~phantomlab.transport.montecarlo.build_baseline`;
        an exception from it (or Ctrl-C) stops the build and writes nothing.
    photons : int, optional
        Photons (default :data:`CACHE_PHOTONS`; at least 1000, at most the ``baseline_photons``
        limit of :mod:`phantomlab.limits`).

    Returns
    -------
    CachedBaseline
        ``baseline`` is the :class:`~phantomlab.calibration.mc_lookup.TabulatedBaseline`.
    """
    settings = cache_settings(g=g, n=n, n_outside=n_outside)
    if photons is not None:
        from phantomlab.limits import check_limit

        settings["photons"] = int(_check_range("photons", photons, 1000, 1e12))
        check_limit("baseline_photons", settings["photons"], given=f"photons {settings['photons']}")
    target = _writable_folder(baseline_folder(folder)) / cache_file_name(g=g, n=n, n_outside=n_outside)
    start = time.perf_counter()
    baseline = _build_and_save(settings, target, progress)
    table_path(target).unlink(missing_ok=True)
    tabulated = _tabulate(baseline, target)
    return CachedBaseline(baseline=tabulated, path=target, built=True, seconds=time.perf_counter() - start)


def find_cached_baseline(*, g, n, n_outside=1.0, folder=None) -> CachedBaseline | None:
    """The cached baseline for (g, n, n_outside) if there is one, else None (never builds).

    Raises
    ------
    CachedBaselineError
        A file is there but cannot be used.
    """
    settings = cache_settings(g=g, n=n, n_outside=n_outside)
    path = baseline_folder(folder) / cache_file_name(g=g, n=n, n_outside=n_outside)
    tabulated = _read_table(path, settings)
    if tabulated is not None:
        return CachedBaseline(baseline=tabulated, path=path, built=False)
    if path.is_file():
        return CachedBaseline(baseline=_tabulate(_read_photons(path, settings), path), path=path, built=False)
    return None


def obtain_baseline(*, g, n, n_outside=1.0, folder=None, rebuild=False, build=True, progress=None) -> CachedBaseline:
    """The cached baseline for (g, n, n_outside): read it, or build it once when missing.

    Its lookup table (``NAME.lookup.npz``, about 0.1 MB) is read when there is one (a fit
    then never loads the photons), else made from the photons and kept.

    Parameters
    ----------
    g, n, n_outside : float
    folder : path, optional
        Cache folder (:func:`baseline_folder`).
    rebuild : bool
        Build again and replace the file even when one is there (also one that is refused).
    build : bool
        False: never build (a missing file is refused with one line).
    progress : callable, optional
        Passed to the build.

    Returns
    -------
    CachedBaseline
        ``baseline`` is a :class:`~phantomlab.calibration.mc_lookup.TabulatedBaseline`.

    Raises
    ------
    CachedBaselineError
        The file is there but unreadable, of another version, or for other inputs (and
        ``rebuild`` is False).
    InputError
        g, n or n_outside out of range; the folder cannot be written when a build is needed;
        no file and ``build`` is False.
    """
    settings = cache_settings(g=g, n=n, n_outside=n_outside)
    path = baseline_folder(folder) / cache_file_name(g=g, n=n, n_outside=n_outside)
    if not rebuild:
        found = find_cached_baseline(g=g, n=n, n_outside=n_outside, folder=folder)
        if found is not None:
            return found
    if not build:
        raise InputError(f"no cached baseline for g = {settings['g']:g}, n = {settings['n']:g}, n_outside = "
                         f"{settings['n_outside']:g} in {path.parent}")
    _writable_folder(path.parent)  # before the half minute of work, not after
    return build_cached_baseline(g=g, n=n, n_outside=n_outside, folder=folder, progress=progress)


def time_cache_settings(*, g, n, n_outside=1.0) -> dict:
    """The rounded (g, n, n_outside) and build inputs of the cached baseline of the td and fd lookups."""
    settings = cache_settings(g=g, n=n, n_outside=n_outside)
    settings.update(mua_per_mm=CACHE_MUS_REF_PER_MM * (1.0 - settings["g"]) / TIME_CACHE_MAX_MUSP_OVER_MUA,
                    photons=TIME_CACHE_PHOTONS, seed=TIME_CACHE_SEED)
    return settings


def time_cache_file_name(*, g, n, n_outside=1.0) -> str:
    """``baseline-g0.80-n1.400-out1.000-time.npz``: the td/fd baseline for the rounded (g, n, n_outside)."""
    return cache_file_name(g=g, n=n, n_outside=n_outside)[: -len(".npz")] + "-time.npz"


def obtain_photon_baseline(*, g, n, n_outside=1.0, folder=None, rebuild=False, progress=None) -> CachedBaseline:
    """The cached td/fd baseline for (g, n, n_outside), tabulated: read, or built once when missing.

    The time- and frequency-domain lookups (:mod:`phantomlab.calibration.mc_lookup_time`) use
    every stored photon's exit radius and path length and need more photons than the srdr
    table (:data:`TIME_CACHE_PHOTONS`; measured on independent Monte Carlo data: with the
    srdr cache's million photons the td fit's own lookup noise moved μa by up to 5 % at
    μs′/μa = 1000).  A cached file with fewer photons (made before the count was raised) is
    used, with a warning that names ``--rebuild``.  Kept in the same folder as ``NAME-time.npz``
    (:func:`time_cache_file_name`), and its smoothed table beside it as ``NAME-time.lookup.npz``
    (:mod:`phantomlab.calibration.time_table_store`): a fit reads the photons only when that
    table is missing, damaged, made by other code or from other photons.

    Returns
    -------
    CachedBaseline
        ``baseline`` is a :class:`~phantomlab.calibration.time_table_store.TimeTabulatedBaseline`
        (the inputs and the table, no photons).

    Raises
    ------
    CachedBaselineError, InputError
        As :func:`obtain_baseline`.
    """
    from phantomlab.calibration.time_table_store import read_time_table, tabulate_time_baseline, time_table_path

    settings = time_cache_settings(g=g, n=n, n_outside=n_outside)
    path = baseline_folder(folder) / time_cache_file_name(g=g, n=n, n_outside=n_outside)
    if path.is_file() and not rebuild:
        from phantomlab.transport.montecarlo import load_baseline_inputs

        try:
            inputs = load_baseline_inputs(path)
        except InputError as exc:
            raise CachedBaselineError(path, _reason(exc, path)) from None
        _check_made_for(path, inputs, settings)
        tabulated = read_time_table(path, inputs)
        if tabulated is None:
            tabulated = tabulate_time_baseline(_read_photons(path, settings), path)
        if int(tabulated.photons) < settings["photons"]:
            warnings.warn(f"the cached td/fd baseline {path.name} holds {int(tabulated.photons):,} photons, fewer than "
                          f"the {settings['photons']:,} a new one gets: the Monte Carlo lookup's own noise (in the "
                          f"SDs) is larger; give --rebuild to replace it (several minutes)", PhantomlabWarning,
                          stacklevel=2)
        return CachedBaseline(baseline=tabulated, path=path, built=False)
    _writable_folder(path.parent)  # before the minutes of work, not after
    start = time.perf_counter()
    baseline = _build_and_save(settings, path, progress)
    time_table_path(path).unlink(missing_ok=True)
    tabulated = tabulate_time_baseline(baseline, path)
    return CachedBaseline(baseline=tabulated, path=path, built=True, seconds=time.perf_counter() - start)


def _build_and_save(settings: dict, target: Path, progress):
    """Run the Monte Carlo baseline of ``settings`` and write it to ``target`` (whole or not at all)."""
    baseline = build_baseline(mua_per_mm=settings["mua_per_mm"], mus_per_mm=settings["mus_per_mm"],
                              g=settings["g"], n=settings["n"], n_outside=settings["n_outside"],
                              photons=settings["photons"], seed=settings["seed"], progress=progress)
    try:
        baseline.save(target)  # a temporary file renamed into place: never half written
    except OSError as exc:
        raise InputError(f"baseline cache file {target} could not be written ({exc.strerror or exc}); choose "
                         f"another folder with --baseline-dir FOLDER or {BASELINE_DIR_ENV}") from None
    return baseline


def list_cached(folder=None) -> list[dict]:
    """The baselines in the cache folder, each ``{file, g, n, n_outside, photons, megabytes, modified, usable,
    lookup_table}``.

    Only the small inputs record of each file is read.  ``usable`` is True, or the reason the
    file would be refused; ``lookup_table`` says whether its table is kept beside it.
    """
    root = baseline_folder(folder)
    if not root.is_dir():
        return []
    from phantomlab.transport.montecarlo import load_baseline_inputs

    rows = []
    for path in sorted(p for p in root.glob("baseline-*.npz") if not p.name.endswith(".lookup.npz")):
        match = _NAME.match(path.name)
        row = {"file": str(path), "g": None, "n": None, "n_outside": None, "photons": None,
               "megabytes": round(path.stat().st_size / 1e6, 3),
               "modified": time.strftime("%Y-%m-%d %H:%M", time.localtime(path.stat().st_mtime)), "usable": True,
               "lookup_table": table_path(path).is_file()}
        try:
            inputs = load_baseline_inputs(path)
            row.update({key: inputs[key] for key in ("g", "n", "n_outside", "photons")})
            if match:
                named = tuple(float(v) for v in match.groups())
                if any(abs(a - b) > _TOLERANCE for a, b in zip(named, (inputs["g"], inputs["n"], inputs["n_outside"]))):
                    row["usable"] = "made for other inputs than its name says"
            else:
                row["usable"] = "not a cache file name (never chosen by a fit)"
        except InputError as exc:
            row["usable"] = str(exc).replace(repr(str(path)), "").strip(" :") or "unreadable"
        rows.append(row)
    return rows


def clear_cached(folder=None) -> list[dict]:
    """Delete the cache's baselines, their lookup tables, the td slab runs and left-over partial writes; returns what was removed."""
    root = baseline_folder(folder)
    if not root.is_dir():
        return []
    removed = []
    for path in sorted(list(root.glob("baseline-*.npz")) + list(root.glob(".baseline-*.part"))  # tables too
                       + list(root.glob("slab-time-*.npz")) + list(root.glob(".slab-time-*.part"))):
        size = path.stat().st_size
        try:
            path.unlink()
        except OSError as exc:
            raise InputError(f"cannot delete {path} ({exc.strerror or exc}); check the folder's permissions") from None
        removed.append({"file": str(path), "megabytes": round(size / 1e6, 3)})
    return removed
