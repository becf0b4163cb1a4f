"""Particle size distributions of sphere and powder stocks (layer 1).

A distribution is held as quadrature nodes: diameters [µm] and number weights summing to 1,
so that any number-weighted average is ``sum(weights * f(diameters))``.  The Mie code
(:mod:`phantomlab.optics.mie`) forms cross-section and volume averages from these nodes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from phantomlab.errors import InputError

__all__ = ["SizeDistribution", "normal_sizes", "lognormal_sizes", "histogram_sizes", "SIZE_NODES"]

#: Quadrature nodes used for a normal or log-normal distribution (over ±4 SD).
SIZE_NODES = 61
#: Widest CV accepted for a normal distribution: above it the normal puts weight at d <= 0.
NORMAL_MAX_CV = 0.25


@dataclass(frozen=True)
class SizeDistribution:
    """Number distribution of sphere diameters as quadrature nodes.

    Attributes
    ----------
    shape : str
        ``"normal"``, ``"lognormal"`` or ``"histogram"``.
    mean_diameter_um : float [µm]
        Number-mean diameter.
    cv : float [dimensionless]
        Relative SD of the diameter (number distribution).
    diameters_um : ndarray [µm]
    number_weights : ndarray
        Sum to 1.
    """

    shape: str
    mean_diameter_um: float
    cv: float
    diameters_um: np.ndarray
    number_weights: np.ndarray

    def __post_init__(self) -> None:
        for name in ("diameters_um", "number_weights"):
            array = np.atleast_1d(np.asarray(getattr(self, name), dtype=float)).copy()
            array.setflags(write=False)
            object.__setattr__(self, name, array)

    @property
    def mean_volume_um3(self) -> float:
        """Number-mean particle volume π⟨d³⟩/6 [µm³]."""
        return float(np.pi / 6.0 * np.sum(self.number_weights * self.diameters_um**3))


def _check(diameter_um: float, cv: float) -> None:
    if not (isinstance(diameter_um, (int, float)) and math.isfinite(diameter_um) and diameter_um > 0):
        raise InputError(f"diameter must be a number > 0 µm, got {diameter_um!r}")
    if not (isinstance(cv, (int, float)) and math.isfinite(cv) and 0 <= cv < 1):
        raise InputError(f"size CV must be a number in [0, 1), got {cv!r}")


def normal_sizes(*, diameter_um: float, cv: float, nodes: int = SIZE_NODES) -> SizeDistribution:
    """Normal number distribution of diameters, mean ``diameter_um``, SD ``cv·diameter_um``.

    Parameters
    ----------
    diameter_um : float [µm]
    cv : float [dimensionless]
        0 gives a monodisperse stock (one node); at most 0.25 (use log-normal for wider).
    nodes : int
        Quadrature nodes over mean ± 4 SD (midpoint rule on the normal density).

    Returns
    -------
    SizeDistribution
    """
    _check(diameter_um, cv)
    if cv > NORMAL_MAX_CV:
        raise InputError(
            f"size CV {cv:g} too wide for a normal distribution (max {NORMAL_MAX_CV:g}); "
            "use size_distribution = \"lognormal\""
        )
    if cv == 0:
        return SizeDistribution("normal", float(diameter_um), 0.0, np.array([diameter_um]), np.array([1.0]))
    sd = cv * diameter_um
    d = diameter_um + sd * np.linspace(-4.0, 4.0, nodes)
    w = np.exp(-0.5 * ((d - diameter_um) / sd) ** 2)
    w /= w.sum()
    return SizeDistribution("normal", float(np.sum(w * d)), float(cv), d, w)


def lognormal_sizes(*, diameter_um: float, cv: float, nodes: int = SIZE_NODES) -> SizeDistribution:
    """Log-normal number distribution with number-mean ``diameter_um`` and relative SD ``cv``.

    σ_ln = √(ln(1 + cv²)), μ_ln = ln(diameter_um) − σ_ln²/2, so that the mean diameter is
    ``diameter_um`` and SD/mean is ``cv`` (moments of the log-normal distribution).

    Parameters
    ----------
    diameter_um : float [µm]
    cv : float [dimensionless]
    nodes : int
        Quadrature nodes, evenly spaced in ln d over μ_ln ± 4 σ_ln.

    Returns
    -------
    SizeDistribution
    """
    _check(diameter_um, cv)
    if cv == 0:
        return SizeDistribution("lognormal", float(diameter_um), 0.0, np.array([diameter_um]), np.array([1.0]))
    sigma = math.sqrt(math.log1p(cv * cv))
    mu = math.log(diameter_um) - 0.5 * sigma * sigma
    z = np.linspace(-4.0, 4.0, nodes)
    d = np.exp(mu + sigma * z)
    w = np.exp(-0.5 * z * z)  # density in ln d, even nodes in ln d
    w /= w.sum()
    return SizeDistribution("lognormal", float(np.sum(w * d)), float(cv), d, w)


def histogram_sizes(*, diameters_um, weights, weighting: str) -> SizeDistribution:
    """A tabulated size histogram (e.g. from a sizing instrument).

    Parameters
    ----------
    diameters_um : array [µm]
        Bin centres.
    weights : array
        Relative number or volume weight of each bin (any scale).
    weighting : str
        ``"number"`` or ``"volume"`` (volume weights are turned into number weights by
        dividing by d³).

    Returns
    -------
    SizeDistribution
    """
    d = np.asarray(diameters_um, dtype=float)
    w = np.asarray(weights, dtype=float)
    if d.ndim != 1 or d.size != w.size or d.size == 0:
        raise InputError("size histogram: diameters and weights must be 1-D of one length")
    if np.any(d <= 0) or np.any(~np.isfinite(d)):
        raise InputError("size histogram: diameters must be > 0 µm")
    if np.any(w < 0) or not np.any(w > 0):
        raise InputError("size histogram: weights must be >= 0 and not all zero")
    if weighting == "volume":
        w = w / d**3
    elif weighting != "number":
        raise InputError(f"size histogram: weighting must be 'number' or 'volume', got {weighting!r}")
    w = w / w.sum()
    mean = float(np.sum(w * d))
    cv = float(math.sqrt(max(np.sum(w * (d - mean) ** 2), 0.0)) / mean)
    return SizeDistribution("histogram", mean, cv, d, w)
