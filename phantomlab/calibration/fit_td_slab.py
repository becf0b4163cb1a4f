"""Fit time-resolved transmittance through a slab with the Monte Carlo-corrected model (layer 3).

The default td fit of transmittance.  The model (``mc-slab``,
:mod:`phantomlab.calibration.slab_time_correction`) needs direct Monte Carlo runs of slabs
near the phantom's thickness in transport lengths τ′ = μs′d, which is what the fit is to find.
So:

1. fit the slab diffusion model contini1997 (Contini et al. 1997), which lands within some
   20 % of μs′ (it is low by 7–19 % on independent Monte Carlo data);
2. take the nodes (τ′ = 2^(k/4)) that bracket τ′ from that fit up to :data:`UPWARD` times
   it, from the cache or run once (:func:`~phantomlab.calibration.slab_time_nodes.obtain_nodes`);
3. fit the corrected model with μs′ kept between the outer nodes;
4. a wavelength whose μs′ ends on a bound gets the next node on that side and the fit is
   repeated (at most :data:`MAX_ROUNDS` rounds; then the fit says so).
"""

from __future__ import annotations

import hashlib
import pickle
import threading
import warnings
from collections import OrderedDict
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from phantomlab.calibration.fit_td import fit_td
from phantomlab.calibration.slab_time_correction import MAX_RELATIVE_SD, MAX_RHO_OVER_D, SlabCorrection
from phantomlab.calibration.slab_time_nodes import NODES_PER_OCTAVE, TAU_PRIME_RANGE, node_grid, obtain_nodes
from phantomlab.errors import InputError, PhantomlabWarning

__all__ = ["SlabNodeSource", "SlabModelOutOfRange", "fit_td_slab", "first_nodes", "UPWARD", "MAX_ROUNDS"]

#: The nodes first taken reach from the diffusion fit's τ′ up to this factor times it (the
#: diffusion model is low in μs′ through slabs: 7–19 % on the slab run of the tests).
UPWARD = 1.12
#: Rounds of "add a node where a fit ended on a bound".
MAX_ROUNDS = 3
_STEP = 2.0 ** (1.0 / NODES_PER_OCTAVE)


class SlabModelOutOfRange(InputError):
    """The slab model does not serve these data; ``reason`` says why (the default fit falls back to diffusion)."""

    def __init__(self, reason: str):
        self.reason = reason
        super().__init__(f"the Monte Carlo slab model does not apply: {reason}; fit with --model contini1997")


@dataclass(frozen=True)
class SlabNodeSource:
    """Where the slab nodes of one (g, n, n_outside) come from: the cache folder, built when missing."""

    g: float
    n: float
    n_outside: float
    folder: str | Path | None = None
    rebuild: bool = False
    progress: object = None

    def obtain(self, tau_primes):
        return obtain_nodes(tau_primes, g=self.g, n=self.n, n_outside=self.n_outside, folder=self.folder,
                            rebuild=self.rebuild, progress=self.progress)


def fit_td_slab(measurement, *, source: SlabNodeSource, n=None, n_outside=None, thickness_mm=None,
                window_rise_fraction=None, window_tail_fraction=None):
    """Fit transmittance through a slab with the Monte Carlo-corrected model (module docstring).

    Parameters
    ----------
    measurement : TimeDomainMeasurement
        Transmittance (``geometry = "transmittance"``) with the slab's thickness.
    source : SlabNodeSource
        The nodes' g, indices and cache.
    n, n_outside, thickness_mm, window_rise_fraction, window_tail_fraction
        As :func:`~phantomlab.calibration.fit_td.fit_td`.

    Returns
    -------
    TimeDomainFit
        ``model`` ``mc-slab``; ``extras["slab_nodes"]``: the τ′ of the nodes used.
    """
    options = {"n": n, "n_outside": n_outside, "thickness_mm": thickness_mm}
    wanted = first_nodes(measurement, n=n, n_outside=n_outside, thickness_mm=thickness_mm)
    d = float(measurement.thickness_mm if thickness_mm is None else thickness_mm)
    fit = None
    for _ in range(MAX_ROUNDS):
        correction = SlabCorrection(source.obtain(wanted))
        span = (wanted[0] / d, wanted[-1] / d)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", PhantomlabWarning)
            fit = fit_td(measurement, model="mc-slab", slab_correction=correction, musp_range_per_mm=span,
                         window_rise_fraction=window_rise_fraction, window_tail_fraction=window_tail_fraction,
                         **options)
        ended = fit.musp_per_mm * d
        low = (ended <= wanted[0] * 1.002) & (wanted[0] / _STEP >= TAU_PRIME_RANGE[0])
        high = (ended >= wanted[-1] / 1.002) & (wanted[-1] * _STEP <= TAU_PRIME_RANGE[1])
        if not (low.any() or high.any()):
            break
        wanted = node_grid(wanted[0] / (_STEP if low.any() else 1.0), wanted[-1] * (_STEP if high.any() else 1.0))
    messages = [" ".join(str(w.message).split()) for w in caught if issubclass(w.category, PhantomlabWarning)]
    used = correction.tau_primes  # the runs of the last fit (the loop may have asked for more after it)
    ended = fit.musp_per_mm * d
    on_bound = (ended <= used[0] * 1.002) | (ended >= used[-1] / 1.002)
    for i in np.flatnonzero(on_bound):
        messages.append(f"at {measurement.wavelength_nm[i]:g} nm mus' ended on the edge of the slab model's range "
                        f"({used[0]:g}–{used[-1]:g} transport lengths): the fit is not trusted there")
    messages += _reach_messages(fit, correction, measurement, d)
    for message in dict.fromkeys(messages):
        warnings.warn(message, PhantomlabWarning, stacklevel=2)
    extras = {**dict(fit.extras), "slab_nodes": [float(t) for t in correction.tau_primes],
              "slab_node_photons": [int(p) for p in correction.photons]}
    return replace(fit, warnings=tuple(dict.fromkeys(messages)), extras=extras)


def first_nodes(measurement, *, n=None, n_outside=None, thickness_mm=None) -> list[float]:
    """The τ′ of the nodes a fit takes first: those bracketing the contini1997 fit's τ′ up to :data:`UPWARD` times it.

    Raises
    ------
    SlabModelOutOfRange
        A lateral offset beyond :data:`~phantomlab.calibration.slab_time_correction.MAX_RHO_OVER_D`
        of the thickness, or a slab outside the nodes' range.
    """
    thickness = measurement.thickness_mm if thickness_mm is None else thickness_mm
    if measurement.geometry != "transmittance" or thickness is None:
        raise InputError("the Monte Carlo slab model fits transmittance through a slab of given thickness")
    d = float(thickness)
    widest = float(np.max(np.abs(measurement.rho_mm)))
    if widest > MAX_RHO_OVER_D * d:
        raise SlabModelOutOfRange(f"a lateral offset of {widest:g} mm is beyond its {MAX_RHO_OVER_D:g} of the "
                                  f"thickness ({MAX_RHO_OVER_D * d:.3g} mm here)")
    tau = _diffusion_tau_prime(measurement, n=n, n_outside=n_outside, thickness_mm=thickness_mm)
    if np.any(tau < TAU_PRIME_RANGE[0]) or np.any(tau > TAU_PRIME_RANGE[1] / UPWARD):
        raise SlabModelOutOfRange(f"the slab is {float(np.min(tau)):.3g}–{float(np.max(tau)):.3g} transport lengths "
                                  f"thick by diffusion, and its runs cover {TAU_PRIME_RANGE[0]:g}–"
                                  f"{TAU_PRIME_RANGE[1] / UPWARD:.3g}")
    return node_grid(float(np.min(tau)), float(np.max(tau)) * UPWARD)


#: The diffusion fits' τ′ of the last few measurements, by the digest of what was fitted
#: (:func:`_diffusion_tau_prime`).
_TAU_PRIME_MEMO: OrderedDict[str, np.ndarray] = OrderedDict()
_TAU_PRIME_MEMO_SIZE = 8
_TAU_PRIME_LOCK = threading.Lock()  # the page's sessions run in threads


def _diffusion_tau_prime(measurement, *, n, n_outside, thickness_mm) -> np.ndarray:
    """τ′ = μs′ d per wavelength from the contini1997 fit, fitted once per measurement.

    The page asks for the first nodes before the fit to run the missing ones with a progress
    bar, then the fit asks again (and the page again on every rerun): the same fit of the same
    data, 0.1–0.3 s each.  The answer is kept under a SHA-256 of the whole measurement
    (pickled: every array and metadata field) with the options, so only identical inputs share
    it; a measurement that cannot be pickled is fitted every time.
    """
    try:
        digest = hashlib.sha256(pickle.dumps((measurement, n, n_outside, thickness_mm),
                                             protocol=pickle.HIGHEST_PROTOCOL)).hexdigest()
    except (pickle.PicklingError, TypeError, AttributeError):
        digest = None
    if digest is not None:
        with _TAU_PRIME_LOCK:
            kept = _TAU_PRIME_MEMO.get(digest)
            if kept is not None:
                _TAU_PRIME_MEMO.move_to_end(digest)
                return kept.copy()
    d = float(measurement.thickness_mm if thickness_mm is None else thickness_mm)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)  # the final fit warns for itself
        first = fit_td(measurement, model="contini1997", n=n, n_outside=n_outside, thickness_mm=thickness_mm)
    tau = first.musp_per_mm * d
    if digest is not None:
        with _TAU_PRIME_LOCK:
            _TAU_PRIME_MEMO[digest] = tau.copy()
            while len(_TAU_PRIME_MEMO) > _TAU_PRIME_MEMO_SIZE:
                _TAU_PRIME_MEMO.popitem(last=False)
    return tau


def _reach_messages(fit, correction, measurement, d) -> list[str]:
    """A warning per wavelength whose fit window reaches where the nodes hold few photons."""
    curves = fit.curves
    time = curves["time_ps"]
    irf_peak = curves["irf_time_ps"][np.argmax(curves["irf"], axis=1)]
    W, R = fit.time_shift_ps.shape
    out = []
    for w in range(W):
        latest = []
        for r in range(R):
            window = np.flatnonzero(curves["window"][w, r])
            peak = irf_peak[w] if irf_peak.size == W and W > 1 else irf_peak[0]
            latest.append(time[window[-1]] - peak - fit.time_shift_ps[w, r])
        sd = correction.relative_sd(musp_per_mm=np.full(R, fit.musp_per_mm[w]), rho_mm=measurement.rho_mm,
                                    time_ps=np.asarray(latest, float)[:, None], thickness_mm=d)
        if np.max(sd) > MAX_RELATIVE_SD:
            out.append(f"at {measurement.wavelength_nm[w]:g} nm the fit window reaches {max(latest):.0f} ps after the "
                       f"pulse, where the slab model's Monte Carlo runs hold few photons (their error there, "
                       f"{100 * float(np.max(sd)):.0f} %, is in the SDs); end the window earlier "
                       "(window_tail_fraction) for a tighter fit")
    return out
