"""What a fit's model is run with, and where each input came from (layer 3).

A fit states the refractive indices, the anisotropy g and the Monte Carlo baseline it used,
each with its origin, so that a reader of its JSON or table can tell an assumption from a
measurement:

* ``n_used`` / ``n_outside_used``: from an option (``--n``, the page's field), else the
  measurement's sidecar, else (n_outside only) the default 1.0 (air);
* ``g_used`` (Monte Carlo lookup only): from an option (``--g``), else the sidecar, else the
  batch's scattering model (the prediction of the batch's plan, when the measurement
  belongs to a batch), else :data:`~phantomlab.calibration.baseline_cache.DEFAULT_G`, or the
  g of a baseline file given explicitly;
* ``baseline``: the cache file used (built now, or read), or the file given.

The origins are ``option``, ``sidecar``, ``batch``, ``default``, ``baseline file``; for the
baseline ``cache``, ``cache (built now)``, ``file``.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from phantomlab.errors import InputError

__all__ = ["ModelInputs", "resolve_model_inputs", "g_sensitivity_note", "band_g_note", "input_parts"]

#: How much R(ρ) at fixed μs′ and μa moves when g changes by 0.1, by distance in transport
#: lengths ρ·μs′ (fractions).  Measured from the independent Monte Carlo fixtures
#: (tests/calibration/fixtures/mc_default_srdr.npz: the same ten media at g = 0.7 and 0.9,
#: half the log ratio of R, the largest over μs′/μa = 10-1000 and n = 1.33, 1.43, rounded up;
#: tests/calibration/test_default_fit.py holds the table to them).  Not monotonic: the ratio
#: R(0.9)/R(0.7) crosses 1 near one transport length and stays 1-2.5 % away from 1 out to
#: about 4; the similarity relation (R a function of μs′ alone) holds to < 1 % from 6 on.
G_SENSITIVITY_TRANSPORT_LENGTHS = (0.5, 0.7, 1.0, 1.5, 2.0, 3.0, 4.0, 6.0)
G_SENSITIVITY_PER_0_1 = (0.032, 0.014, 0.009, 0.021, 0.025, 0.021, 0.022, 0.007)


@dataclass(frozen=True)
class ModelInputs:
    """Inputs of one fit with their origins (see the module docstring)."""

    n: float | None
    n_origin: str | None
    n_outside: float
    n_outside_origin: str
    g: float | None = None
    g_origin: str | None = None
    baseline: Any = None
    baseline_path: str | None = None
    baseline_origin: str | None = None

    def to_json(self) -> dict[str, Any]:
        """The JSON keys: ``n_used``, ``n_origin``, ``n_outside_used``, ``n_outside_origin``,
        ``g_used``, ``g_origin``, ``baseline``, ``baseline_origin``."""
        return {"n_used": self.n, "n_origin": self.n_origin, "n_outside_used": self.n_outside,
                "n_outside_origin": self.n_outside_origin, "g_used": self.g, "g_origin": self.g_origin,
                "baseline": self.baseline_path, "baseline_origin": self.baseline_origin}

    def lines(self) -> list[str]:
        """One readable line per input, for the command's table and the page."""
        out = [f"n = {self.n:g} ({self.n_origin}), n_outside = {self.n_outside:g} ({self.n_outside_origin})"
               if self.n is not None else f"n_outside = {self.n_outside:g} ({self.n_outside_origin})"]
        if self.g is not None:
            out.append(f"g = {self.g:g} ({self.g_origin})")
        if self.baseline_path is not None:
            out.append(f"baseline {self.baseline_path} ({self.baseline_origin})")
        return out


def _origin(key: str, given: Mapping[str, Any], sidecar: Mapping[str, Any]) -> str | None:
    if given.get(key) is not None:
        return "option"
    if sidecar.get(key) is not None:
        return "sidecar"
    return None


def resolve_model_inputs(
    measurement,
    *,
    model: str,
    given: Mapping[str, Any],
    sidecar: Mapping[str, Any],
    g_fallback: tuple[float, str] | None = None,
    baseline=None,
    baseline_dir=None,
    rebuild: bool = False,
    progress=None,
) -> ModelInputs:
    """The indices, g and baseline a fit of ``measurement`` uses, with their origins.

    Parameters
    ----------
    measurement : Measurement
        Read with the options already applied (its metadata hold the values used).
    model : str
        The fit model; ``mc`` resolves g and the baseline, building the cached one if needed.
    given : mapping
        The options the caller gave (``n``, ``n_outside``, ``g``; None = not given).
    sidecar : mapping
        The sidecar table as read (to tell a sidecar value from a default).
    g_fallback : (float, str), optional
        g and its origin when neither option nor sidecar gives one (the batch's scattering
        model).
    baseline : Baseline, TabulatedBaseline or path, optional
        An explicit baseline (``--baseline FILE``): used as given, g taken from it.
    baseline_dir, rebuild, progress
        For the cache (:func:`phantomlab.calibration.baseline_cache.obtain_baseline`).

    Returns
    -------
    ModelInputs
    """
    meta = measurement.metadata
    n = None if meta.n is None else float(meta.n)
    n_origin = _origin("n", given, sidecar) if n is not None else None
    n_outside = float(meta.n_outside)
    n_outside_origin = _origin("n_outside", given, sidecar) or "default"
    inputs = ModelInputs(n=n, n_origin=n_origin, n_outside=n_outside, n_outside_origin=n_outside_origin)
    if model != "mc" or measurement.kind not in ("srdr", "sfdi", "td", "fd"):
        return inputs
    if n is None:
        raise InputError(f"the {measurement.kind} fit needs the phantom's refractive index: give --n N or "
                         f"n = ... in the sidecar")
    g_origin = _origin("g", given, sidecar)
    g = {"option": given.get("g"), "sidecar": meta.g if meta.g is not None else sidecar.get("g")}.get(g_origin)
    g = None if g is None else float(g)
    if baseline is not None:
        path = None
        if isinstance(baseline, (str, Path)):
            path = Path(baseline)
            if not path.is_file():
                raise InputError(f"baseline file {str(path)!r} not found")
            from phantomlab.transport.montecarlo import load_baseline

            baseline = load_baseline(path)
        made_g = float(baseline.g)
        if g is not None and abs(g - made_g) > 0.005:
            raise InputError(f"g = {g:g} ({g_origin}) but the baseline {path or 'given'} was made for g = "
                             f"{made_g:g}; drop one of them")
        return ModelInputs(n=n, n_origin=n_origin, n_outside=n_outside, n_outside_origin=n_outside_origin,
                           g=made_g, g_origin="baseline file", baseline=baseline,
                           baseline_path=None if path is None else str(path), baseline_origin="file")
    if g is None and g_fallback is not None:
        g, g_origin = float(g_fallback[0]), str(g_fallback[1])
    if g is None:
        from phantomlab.calibration.baseline_cache import DEFAULT_G

        g, g_origin = DEFAULT_G, "default"
    from phantomlab.calibration.baseline_cache import (baseline_folder, cache_settings, obtain_baseline,
                                                        obtain_photon_baseline)

    rounded = cache_settings(g=g, n=n, n_outside=n_outside)
    if measurement.kind == "td" and getattr(measurement, "geometry", "reflectance") == "transmittance":
        # transmittance: the slab model's Monte Carlo nodes, taken from the cache by the fit
        # itself once it knows the slab's thickness in transport lengths (fit_td_slab.py)
        from phantomlab.calibration.fit_td_slab import SlabNodeSource

        source = SlabNodeSource(g=rounded["g"], n=rounded["n"], n_outside=rounded["n_outside"], folder=baseline_dir,
                                rebuild=rebuild, progress=progress)
        return ModelInputs(n=n, n_origin=n_origin, n_outside=n_outside, n_outside_origin=n_outside_origin,
                           g=rounded["g"], g_origin=g_origin, baseline=source,
                           baseline_path=str(baseline_folder(baseline_dir)), baseline_origin="cache (slab runs)")
    # td and fd read the photons' path lengths, which only the baseline file itself keeps
    obtain = obtain_photon_baseline if measurement.kind in ("td", "fd") else obtain_baseline
    cached = obtain(g=g, n=n, n_outside=n_outside, folder=baseline_dir, rebuild=rebuild, progress=progress)
    return ModelInputs(n=n, n_origin=n_origin, n_outside=n_outside, n_outside_origin=n_outside_origin,
                       g=rounded["g"], g_origin=g_origin, baseline=cached.baseline, baseline_path=str(cached.path),
                       baseline_origin="cache (built now)" if cached.built else "cache")


def g_sensitivity_note(*, g: float, g_origin: str, rho_mm, musp_per_mm) -> str | None:
    """How much an error of 0.1 in the assumed g moves R at the data's shortest distance, and at most.

    Parameters
    ----------
    g : float
        The g used.
    g_origin : str
        Where it came from (``default``, ``batch``, ``option``, ``sidecar``).
    rho_mm : array [mm]
        The distances of the fit.
    musp_per_mm : array [1/mm]
        Fitted μs′ per wavelength (the smallest sets the shortest distance in transport lengths).

    Returns
    -------
    str or None
        From :data:`G_SENSITIVITY_PER_0_1` (measured, see there); None without distances.
    """
    found = _sensitivity(rho_mm, musp_per_mm)
    if found is None:
        return None
    at_shortest, largest, below = found
    rho = np.asarray(rho_mm, float)
    musp = np.asarray(musp_per_mm, float)
    shortest = float(np.min(rho[np.isfinite(rho) & (rho > 0)]) * np.min(musp[np.isfinite(musp) & (musp > 0)]))
    how = {"default": "assumed (the default; give --g G, or fit the measurement through its batch)",
           "batch": "from the batch's scattering model"}.get(g_origin, f"from the {g_origin}")
    return (f"Monte Carlo lookup with g = {g:g} {how}: a change of g by 0.1 moves R by "
            f"{'more than' if below else 'about'} {100 * at_shortest:.1f} % at the shortest distance "
            f"({shortest:.2g} transport lengths) and by up to {100 * largest:.1f} % over the distances fitted "
            f"(measured on independent Monte Carlo runs at g 0.7 and 0.9)")


def _sensitivity(rho_mm, musp_per_mm) -> tuple[float, float, bool] | None:
    """R's change per 0.1 of g at the shortest distance, the largest over the distances, and
    whether the shortest lies below the table (:data:`G_SENSITIVITY_PER_0_1`)."""
    rho = np.asarray(rho_mm, float)
    rho = rho[np.isfinite(rho) & (rho > 0)]
    musp = np.asarray(musp_per_mm, float)
    musp = musp[np.isfinite(musp) & (musp > 0)]
    if rho.size == 0 or musp.size == 0:
        return None
    nodes = np.asarray(G_SENSITIVITY_TRANSPORT_LENGTHS)
    values = np.asarray(G_SENSITIVITY_PER_0_1)
    shortest = float(rho.min() * musp.min())
    farthest = float(rho.max() * musp.max())
    inside = (nodes >= shortest) & (nodes <= farthest)
    at_shortest = float(np.interp(np.log(shortest), np.log(nodes), values))
    largest = max([at_shortest, float(np.interp(np.log(farthest), np.log(nodes), values))]
                  + list(values[inside]))
    return at_shortest, largest, shortest < nodes[0]


def band_g_note(*, g_per_wavelength, g_origin: str, step: float, rho_mm, musp_per_mm) -> str | None:
    """The note on g of a band fitted with one baseline per g step (phantomlab.calibration.band_g).

    Parameters
    ----------
    g_per_wavelength : array (W,)
        The g each wavelength was fitted with (rounded to ``step``).
    g_origin : str
        Where the g per wavelength came from (``batch``: the batch's scattering model).
    step : float
        The rounding step of g; the g used is at most half of it away from the model's.
    rho_mm : array [mm]
    musp_per_mm : array [1/mm]

    Returns
    -------
    str or None
        None without distances.
    """
    found = _sensitivity(rho_mm, musp_per_mm)
    if found is None:
        return None
    _, largest, below = found
    g = np.asarray(g_per_wavelength, float)
    how = "the batch's scattering model" if g_origin == "batch" else f"the {g_origin}"
    return (f"Monte Carlo lookup with g per wavelength from {how}, {g.max():g} to {g.min():g}, rounded to "
            f"{step:g} (one baseline per step): the rounding (at most {step / 2:g}) moves R by "
            f"{'more than' if below else 'at most'} {100 * largest * (step / 2) / 0.1:.2g} % over the distances "
            f"fitted (a change of g by 0.1 moves it by up to {100 * largest:.1f} %, measured on independent "
            "Monte Carlo runs at g 0.7 and 0.9)")


def _g_text(g) -> str:
    if isinstance(g, (list, tuple, np.ndarray)):
        values = np.asarray(g, float)
        return f"{values.max():g} to {values.min():g} per wavelength"
    return f"{g:g}"


def input_parts(inputs) -> list[str]:
    """The n, g and baseline a fit used, each with where it came from (from its JSON keys).

    ``inputs``: a fit's ``extras`` or JSON (``n_used``, ``n_origin``, ``n_outside_used``,
    ``n_outside_origin``, ``g_used``, ``g_origin``, ``baseline``, ``baseline_origin``); the
    command line prints one part per line, the page joins them on one.
    """
    parts = []
    if inputs.get("n_used") is not None:
        parts.append(f"n = {inputs['n_used']:g} ({inputs.get('n_origin')}), n_outside = "
                     f"{inputs.get('n_outside_used', 1.0):g} ({inputs.get('n_outside_origin')})")
    if inputs.get("g_used") is not None:
        parts.append(f"g = {_g_text(inputs['g_used'])} ({inputs.get('g_origin')})")
    if inputs.get("baseline"):
        files = inputs["baseline"]
        files = ", ".join(map(str, files)) if isinstance(files, (list, tuple)) else files
        parts.append(f"baseline: {files} ({inputs.get('baseline_origin')})")
    return parts
