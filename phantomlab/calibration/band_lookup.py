"""One Monte Carlo lookup per group of wavelengths, for a joint fit over a band whose g changes (layer 3).

A spectrally constrained fit (μs′ as a power law, μa from stock spectra) ties the band's
wavelengths into one least-squares problem, so the band cannot be split into independent
fits per g step as :func:`phantomlab.calibration.band_g.fit_band` does for free fits.
Instead the joint fit gets one forward model whose rows are routed: the wavelengths of each
g step (:func:`phantomlab.calibration.band_g.wavelength_groups`) are modelled with the lookup
of that step's baseline, so each wavelength is fitted with a g within half a step of its own
while the constraint still couples them all.

The routed model answers for the whole band at once (one (μa, μs′) pair per wavelength, in
wavelength order): a grid search over trial pairs cannot be routed, so the joint fit starts
from the free fit of each group (:func:`phantomlab.calibration.band_g.fit_band`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from phantomlab.errors import InputError

__all__ = ["BandBaselines", "RoutedLookup", "routed_forward"]


@dataclass(frozen=True, eq=False)
class BandBaselines:
    """Baselines of a band: ``baselines[k]`` models the wavelengths ``rows[k]`` of ``size``.

    Attributes
    ----------
    baselines : tuple
        :class:`~phantomlab.transport.montecarlo.Baseline` or
        :class:`~phantomlab.calibration.mc_lookup.TabulatedBaseline`, one per group.
    rows : tuple of ndarray of int
        Indices of each group's wavelengths in the band (together each index exactly once;
        any sequences of integers are taken).
    size : int
        Number of wavelengths W of the band.
    """

    baselines: tuple
    rows: tuple
    size: int

    def __post_init__(self):
        object.__setattr__(self, "rows", tuple(np.asarray(r, int).reshape(-1) for r in self.rows))
        if len(self.baselines) != len(self.rows) or not self.baselines:
            raise InputError("a band's baselines: one group of wavelength rows per baseline, at least one")
        every = np.sort(np.concatenate(self.rows))
        if not np.array_equal(every, np.arange(self.size)):
            raise InputError(f"a band's baselines must cover each of its {self.size} wavelengths exactly once")

    def per_row(self, values) -> np.ndarray:
        """A value per group spread to its wavelengths, shape (W,)."""
        out = np.empty(self.size)
        for value, rows in zip(values, self.rows):
            out[rows] = float(value)
        return out

    @property
    def minimum_absorption_ratio(self) -> np.ndarray:
        """Smallest μa/μs each wavelength's baseline answers for, (W,)."""
        from phantomlab.calibration.fit_srdr import baseline_absorption_floor

        return self.per_row([baseline_absorption_floor(b) for b in self.baselines])


def _check_band(size: int, *arrays) -> list[np.ndarray]:
    out = [np.asarray(a, float) for a in arrays]
    for a in out:
        if a.shape[:1] != (size,):
            raise ValueError(f"a routed Monte Carlo model answers for its band's {size} wavelengths at once, "
                             f"not for {a.shape[:1]} pairs")
    return out


class RoutedLookup:
    """The lookups of a band's groups behind the row-wise methods the srdr fit reads.

    ``g`` is per wavelength (W,); the methods take arrays over the band's W wavelengths and
    hand each group its rows.
    """

    def __init__(self, lookups, band: BandBaselines):
        self.lookups = tuple(lookups)
        self.band = band
        self.rows = band.rows
        self.g = band.per_row([lookup.g for lookup in self.lookups])
        self.baseline = band

    def _route(self, method: str, **arrays):
        size = self.band.size
        _check_band(size, *arrays.values())
        out = None
        for lookup, rows in zip(self.lookups, self.rows):
            block = np.asarray(getattr(lookup, method)(**{k: np.asarray(v)[rows] for k, v in arrays.items()}))
            if out is None:
                out = np.empty((size,) + block.shape[1:], dtype=block.dtype)
            out[rows] = block
        return out

    def served(self, *, mua_per_mm, mus_per_mm, rho_mm) -> np.ndarray:
        """As :meth:`~phantomlab.calibration.mc_lookup.SmoothLookup.served`, rho_mm of shape (W, R)."""
        return self._route("served", mua_per_mm=mua_per_mm, mus_per_mm=mus_per_mm, rho_mm=rho_mm)

    def served_limit_mm(self, *, mua_per_mm, mus_per_mm) -> np.ndarray:
        """As :meth:`~phantomlab.calibration.mc_lookup.SmoothLookup.served_limit_mm`, (W,)."""
        return self._route("served_limit_mm", mua_per_mm=mua_per_mm, mus_per_mm=mus_per_mm)

    def reach_warning(self, *, mus_per_mm, rho_max_mm) -> str | None:
        """The first group's message when a distance lies beyond its table, or None."""
        (mus,) = _check_band(self.band.size, mus_per_mm)
        for lookup, rows in zip(self.lookups, self.rows):
            message = lookup.reach_warning(mus_per_mm=mus[rows], rho_max_mm=rho_max_mm)
            if message:
                return message
        return None


#: Per-pair functions a lookup forward model may carry (each routed like the model itself):
#: the lookup's own SD (srdr) and the share of R(fx) resting on unserved distances (sfdi).
_ROUTED_FUNCTIONS = ("model_sd", "unserved_share")
#: Plain attributes copied from the first group's model (they depend on the distances and
#: the detector only, the same for every group).
_SHARED_ATTRIBUTES = ("outer_mm", "rho_max_mm", "detector")


def routed_forward(forwards, band: BandBaselines):
    """One forward model over the band from one forward model per group (same axis, detector).

    Parameters
    ----------
    forwards : sequence of callables
        ``forward(mua (N,), musp (N,)) -> (N, M)`` of each group, with a ``lookup``
        (:func:`phantomlab.calibration.fit_srdr.srdr_forward` or
        :func:`phantomlab.calibration.fit_sfdi.sfdi_forward` with that group's baseline).
    band : BandBaselines

    Returns
    -------
    callable
        ``forward(mua (W,), musp (W,)) -> (W, M)``, its per-pair functions
        (:data:`_ROUTED_FUNCTIONS`) routed the same way and ``lookup`` a
        :class:`RoutedLookup`; it refuses any other number of pairs.
    """
    forwards = tuple(forwards)
    rows = band.rows

    def route(name):
        def call(mua, musp):
            mua, musp = _check_band(band.size, mua, musp)
            out = None
            for f, r in zip(forwards, rows):
                block = np.asarray((f if name is None else getattr(f, name))(mua[r], musp[r]), float)
                if out is None:
                    out = np.empty((band.size,) + block.shape[1:])
                out[r] = block
            return out
        return call

    forward = route(None)
    for name in _ROUTED_FUNCTIONS:
        if hasattr(forwards[0], name):
            setattr(forward, name, route(name))
    for name in _SHARED_ATTRIBUTES:
        if hasattr(forwards[0], name):
            setattr(forward, name, getattr(forwards[0], name))
    forward.lookup = RoutedLookup([f.lookup for f in forwards], band)
    return forward
