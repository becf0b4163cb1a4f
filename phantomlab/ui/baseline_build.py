"""The cached Monte Carlo baseline a page fit needs: found, or built with progress and a stop button.

The default srdr/sfdi fit (the Monte Carlo lookup) needs a baseline for (g, n, n_outside)
from the per-user cache (``phantomlab.calibration.baseline_cache``).  When there is none, the
page builds it once (about a minute) with a progress bar and a "Stop the build" button:
pressing it makes Streamlit rerun the page, which ends the build at its next progress step,
and nothing is written.  A cached file that is refused (damaged, another version, other
indices) is named, and built again only when the user presses the button that says so.
"""

from __future__ import annotations

import time

import streamlit as st

from phantomlab.ui.widgets import call_layer

__all__ = ["baseline_files", "page_baseline", "page_slab_nodes", "describe_inputs"]

#: Files of a Monte Carlo baseline and its lookup table.
BASELINE_SUFFIXES = (".npz",)


def baseline_files(*folders) -> tuple:
    """The state of the Monte Carlo baseline files in ``folders`` (None: the per-user cache)."""
    from phantomlab.calibration.baseline_cache import baseline_folder  # layer 3
    from phantomlab.ui.page_cache import folder_state

    return tuple(folder_state(baseline_folder(folder) if folder is None else folder, BASELINE_SUFFIXES)
                 for folder in folders)


@st.cache_resource(show_spinner=False, max_entries=8)
def _found(g: float, n: float, n_outside: float, time_resolved: bool, files: tuple):
    """The cached baseline if there is one (None: none yet), read once per state of the cache
    folder (``files``); ``time_resolved``: the td/fd file with its photons."""
    from phantomlab.calibration.baseline_cache import (baseline_folder, find_cached_baseline, obtain_photon_baseline,
                                                       time_cache_file_name)

    if time_resolved:
        path = baseline_folder() / time_cache_file_name(g=g, n=n, n_outside=n_outside)
        return obtain_photon_baseline(g=g, n=n, n_outside=n_outside) if path.is_file() else None
    return find_cached_baseline(g=g, n=n, n_outside=n_outside)


def _stop(key: str) -> None:
    st.session_state[f"{key}.stopped"] = True


def _may_run(key: str, *, stopped: str, restart: str, stop: str, stop_help: str) -> bool:
    """False after the user stopped a run (until they press ``restart``); else shows the stop button."""
    if st.session_state.get(f"{key}.stopped"):
        st.info(stopped)
        if not st.button(restart, key=f"{key}.restart"):
            return False
        st.session_state[f"{key}.stopped"] = False
    st.button(stop, key=f"{key}.stop", on_click=_stop, args=(key,), help=stop_help)
    return True


def page_baseline(*, g: float, n: float, n_outside: float, key: str, offer_rebuild: bool = True,
                  time_resolved: bool = False):
    """The cached baseline for (g, n, n_outside), building it when missing; None while there is none.

    ``offer_rebuild=False`` (inside a form's submitted run, where a second button cannot
    carry on the flow): a refused file is named with where to build it again.
    ``time_resolved=True``: the td/fd baseline with its photons (``NAME-time.npz``, a few
    minutes to build: 5–15 on two cores).

    Returns
    -------
    CachedBaseline or None
        None when the user has to act first (a refused file, a stopped build) or the build failed;
        the page says which.
    """
    from phantomlab.calibration.baseline_cache import CachedBaselineError, obtain_baseline, obtain_photon_baseline

    obtain = obtain_photon_baseline if time_resolved else obtain_baseline  # td/fd: the time file
    rebuild = False
    try:
        found = _found(float(g), float(n), float(n_outside), bool(time_resolved), baseline_files(None))
    except CachedBaselineError as exc:
        st.error(f"The cached Monte Carlo baseline {exc.path.name} cannot be used: {exc.reason}.")
        if not offer_rebuild:
            st.info("Build it again on the page “Fit and correct” (it asks first), or fit with a diffusion model.")
            return None
        took = "5–15 minutes" if time_resolved else "about a minute"
        if not st.button(f"Build it again ({took})", key=f"{key}.rebuild"):
            return None
        found, rebuild = None, True
    except Exception as exc:  # an InputError: g or an index out of the cache's range
        st.error(" ".join(str(exc).split()))
        return None
    if found is not None:
        return found
    if not _may_run(key, stopped="The baseline build was stopped; nothing was written.", restart="Build the baseline",
                    stop="Stop the build", stop_help="Ends the build at its next step; nothing is written."):
        return None
    bar = st.progress(0.0, text=f"Building the Monte Carlo baseline for g = {g:.2f}, n = {n:g} (once, about half "
                                "a minute on two cores; td/fd: 5–15 minutes, ten million photons)…")
    started = time.monotonic()

    def progress(done: int, total: int) -> None:
        # every update is a Streamlit call: a press of "Stop the build" ends the run here
        bar.progress(min(done / total, 1.0) if total else 1.0,
                     text=f"Building the Monte Carlo baseline: {done:,} of {total:,} photons, "
                          f"{time.monotonic() - started:.0f} s")

    built = call_layer("Building the baseline", obtain, g=g, n=n, n_outside=n_outside, rebuild=rebuild,
                       progress=progress)
    bar.empty()
    if not built.ok:
        return None
    st.success(f"Baseline built in {built.value.seconds:.0f} s and kept as {built.value.path}; later fits reuse it.")
    return built.value


def describe_inputs(inputs: dict) -> str:
    """One line: the n, g and baseline a fit used and where each came from (from its JSON keys)."""
    from phantomlab.calibration.fit_inputs import input_parts  # layer 3

    return " · ".join(input_parts(inputs))


def page_slab_nodes(*, measurement, g: float, key: str) -> bool:
    """Make sure the Monte Carlo slab runs a transmittance fit takes first are cached, running them with progress.

    Returns True when the fit can go ahead (the runs are there, or the slab model does not apply
    and the fit falls back to diffusion, which it says); False while the user has to act (a
    stopped run, a refused file, an error: the page says which).
    """
    from phantomlab.calibration.baseline_cache import baseline_folder  # layer 3
    from phantomlab.calibration.fit_td_slab import SlabModelOutOfRange, first_nodes
    from phantomlab.calibration.slab_time_nodes import NODE_PHOTONS, node_file_name, obtain_nodes

    meta = measurement.metadata
    try:
        wanted = first_nodes(measurement)
    except SlabModelOutOfRange:
        return True  # the default fit falls back to contini1997 and says why
    except Exception as exc:  # an InputError: the fit will say it too
        st.error(" ".join(str(exc).split()))
        return False
    n_outside = float(meta.n_outside)
    missing = [t for t in wanted if not (baseline_folder() / node_file_name(g=g, n=meta.n, n_outside=n_outside,
                                                                            tau_prime=t)).is_file()]
    if not missing:
        return True
    if not _may_run(key, stopped="The slab runs were stopped; nothing was written for the run in progress.",
                    restart="Run them", stop="Stop the runs",
                    stop_help="Ends the run in progress at its next step; runs already finished are kept."):
        return False
    bar = st.progress(0.0, text=f"Running the slab model's Monte Carlo slabs at {', '.join(f'{t:g}' for t in missing)} "
                                f"transport lengths (once for g = {g:.2f}, n = {meta.n:g}; {NODE_PHOTONS:,} photons "
                                "each, 3–6 minutes each on two cores)…")
    started = time.monotonic()

    def progress(done: int, total: int) -> None:
        bar.progress(min(done / total, 1.0) if total else 1.0,
                     text=f"Monte Carlo slabs: {done:,} of {total:,} photons, {time.monotonic() - started:.0f} s")

    ran = call_layer("Running the slab model's Monte Carlo slabs", obtain_nodes, missing, g=g, n=meta.n,
                     n_outside=n_outside, progress=progress)
    bar.empty()
    if not ran.ok:
        return False
    st.success(f"Monte Carlo slabs run in {time.monotonic() - started:.0f} s and kept in {baseline_folder()}; later "
               "fits reuse them.")
    return True
