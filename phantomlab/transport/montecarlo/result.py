"""What a Monte Carlo run returns: :class:`MonteCarloResult`, the bins of its tallies, the specular reflection (layer 2).

:func:`phantomlab.transport.montecarlo.simulate.simulate` fills a :class:`MonteCarloResult`;
:func:`rho_bin_edges_mm` and :func:`time_bin_edges_ps` give the edges of its radial and time
bins from their centres, :func:`specular_reflectance` the exact reflection of the incident
beam at the entry face (Fresnel at normal incidence, through an optional slide).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from phantomlab.errors import InputError
from phantomlab.transport.montecarlo import _kernels
from phantomlab.transport.montecarlo._validate import check_index, check_rho_grid

__all__ = ["MonteCarloResult", "rho_bin_edges_mm", "time_bin_edges_ps", "specular_reflectance"]


@dataclass(frozen=True, eq=False)  # holds arrays: identity equality
class MonteCarloResult:
    """Tallies of one Monte Carlo run; every reflectance/transmittance is a fraction of the
    incident power, each with its standard error (``*_sd``) from the spread of independent
    batches.

    Attributes
    ----------
    specular_reflectance : float
        Reflection of the incident beam at the entry face (outside → slide → medium),
        exact (no sampling), so ``specular_reflectance_sd`` is 0.
    diffuse_reflectance : float
        All light leaving the top face except the specular reflection:
        ``total_reflectance − specular_reflectance`` (as in the adding-doubling
        :class:`~phantomlab.transport.adding_doubling.SlabResult`).
    unscattered_reflectance : float
        The part of the diffuse reflectance that was never scattered (the beam bounced back
        by the bottom face of a mismatched slab); 0 for a semi-infinite medium.
    total_reflectance : float
        specular + diffuse reflectance (what an integrating sphere sees).
    diffuse_transmittance, unscattered_transmittance, total_transmittance : float
        Light leaving the bottom face with / without scattering, and their sum (0 for a
        semi-infinite medium).
    absorbed_fraction : float
        Light absorbed in the medium.
    roulette_balance : float
        Weight created minus weight destroyed by Russian roulette (weighted estimator);
        zero on average, exactly 0 for the analog estimator.
    n_slide : tuple or None
        Slide indices (top, bottom) as used (None entries: bare face), or None.
    rho_mm, rho_edges_mm : ndarray or None [mm]
        Radial bin centres as given and the bin edges used (midpoints between centres).
    reflectance_per_mm2, reflectance_per_mm2_sd : ndarray or None [1/mm²]
        Spatially resolved reflectance: power leaving the top face in each annulus, per unit
        area and per unit incident power (average over the annulus; the entry loss
        1 − R_specular is inside, the specular reflection is not counted).  This is the
        project's convention for ``reflectance_per_mm2`` (DEVELOPERS.md, "Reflectance
        conventions"); the diffusion models of :mod:`phantomlab.transport.diffusion` follow it.
    photons, batches, seed, threads : int
        Launched photons, independent batches, master seed, threads used.
    interactions : int
        Interaction (collision) events simulated.
    seconds : float [s]
        Simulation wall time, JIT compilation excluded.
    figure_of_merit : float [1/s]
        1 / (σ² t) with σ the standard error of the diffuse reflectance and t ``seconds``.
    time_ps, time_edges_ps : ndarray or None [ps]
        Time bin centres as given and their edges (midpoints), when a time grid was given;
        time 0 is the moment the photon enters the medium, time = path length inside the
        medium / (c/n).
    reflectance_per_mm2_per_ps, reflectance_per_mm2_per_ps_sd : ndarray (R, T) or None [1/(mm² ps)]
        Time-resolved reflectance: power leaving the top face per unit area (annulus average
        over the ``rho_mm`` bins) and per unit time (average over the time bin), per unit
        incident energy (entry loss inside, specular reflection not counted).
    transmittance_per_mm2_per_ps, transmittance_per_mm2_per_ps_sd : ndarray (R, T) or None
        The same for the bottom face of a slab, ``rho_mm`` then being the lateral distance from
        the beam axis (None for a semi-infinite medium).
    gated_fraction, gated_fraction_sd : float or None
        With ``time_gate=True``: the light dropped when its path passed the last time edge
        (in no other tally, so R + T + A + gated = 1 + roulette_balance); None otherwise.
    """

    geometry: str
    estimator: str
    mua_per_mm: float
    mus_per_mm: float
    g: float
    n: float
    n_outside: float
    n_slide: tuple | None
    thickness_mm: float | None
    backscatter_probability: float | None
    specular_reflectance: float
    specular_reflectance_sd: float
    diffuse_reflectance: float
    diffuse_reflectance_sd: float
    unscattered_reflectance: float
    unscattered_reflectance_sd: float
    total_reflectance: float
    total_reflectance_sd: float
    diffuse_transmittance: float
    diffuse_transmittance_sd: float
    unscattered_transmittance: float
    unscattered_transmittance_sd: float
    total_transmittance: float
    total_transmittance_sd: float
    absorbed_fraction: float
    absorbed_fraction_sd: float
    roulette_balance: float
    roulette_balance_sd: float
    rho_mm: np.ndarray | None
    rho_edges_mm: np.ndarray | None
    reflectance_per_mm2: np.ndarray | None
    reflectance_per_mm2_sd: np.ndarray | None
    photons: int
    batches: int
    seed: int
    threads: int
    interactions: int
    seconds: float
    figure_of_merit: float
    time_ps: np.ndarray | None = None
    time_edges_ps: np.ndarray | None = None
    reflectance_per_mm2_per_ps: np.ndarray | None = None
    reflectance_per_mm2_per_ps_sd: np.ndarray | None = None
    transmittance_per_mm2_per_ps: np.ndarray | None = None
    transmittance_per_mm2_per_ps_sd: np.ndarray | None = None
    gated_fraction: float | None = None
    gated_fraction_sd: float | None = None

    @property
    def interactions_per_second(self) -> float:
        """Interaction events per second of simulation wall time [1/s]."""
        return self.interactions / self.seconds if self.seconds > 0 else math.inf

    def to_json(self) -> dict:
        """The result as a plain dict with the docs/contract.md ``forward --kind mc`` keys (and more).

        ``rho_mm`` and ``reflectance_per_mm2`` (with ``reflectance_per_mm2_sd`` and
        ``rho_edges_mm``) appear only when a radial grid was given.
        """
        payload = asdict(self)
        if self.rho_mm is None:
            for key in ("rho_mm", "rho_edges_mm", "reflectance_per_mm2", "reflectance_per_mm2_sd"):
                payload.pop(key)
        for key in ("time_ps", "time_edges_ps", "reflectance_per_mm2_per_ps", "reflectance_per_mm2_per_ps_sd",
                    "transmittance_per_mm2_per_ps", "transmittance_per_mm2_per_ps_sd", "gated_fraction",
                    "gated_fraction_sd"):
            if payload.get(key) is None:
                payload.pop(key)
        payload["interactions_per_second"] = self.interactions_per_second
        return payload


def _midpoint_edges(centres: np.ndarray) -> np.ndarray:
    """Edges between increasing bin centres: midpoints; the outer edges as far out as the first
    and last midpoints lie from their centres (the lowest clipped at 0)."""
    edges = np.empty(centres.size + 1)
    edges[1:-1] = 0.5 * (centres[1:] + centres[:-1])
    edges[0] = max(0.0, centres[0] - 0.5 * (centres[1] - centres[0]))
    edges[-1] = centres[-1] + 0.5 * (centres[-1] - centres[-2])
    return edges


def rho_bin_edges_mm(rho_mm) -> np.ndarray:
    """Bin edges [mm] for radial bin centres ``rho_mm``: midpoints between neighbours.

    The first lower edge lies as far below the first centre as the first midpoint lies
    above it (clipped at 0), and likewise the last upper edge above the last centre.

    Parameters
    ----------
    rho_mm : array_like [mm]
        At least two strictly increasing distances >= 0 (bin centres).

    Returns
    -------
    ndarray [mm], shape (R + 1,)
    """
    centres = check_rho_grid(rho_mm)
    return _midpoint_edges(centres)


def time_bin_edges_ps(time_ps) -> np.ndarray:
    """Bin edges [ps] for time bin centres: midpoints, first and last half a step outside.

    Parameters
    ----------
    time_ps : array_like [ps]
        At least two strictly increasing times >= 0 (bin centres).

    Returns
    -------
    ndarray [ps], shape (T + 1,)
    """
    try:
        centres = np.asarray(time_ps, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"time_ps must be a list of times [ps], got {time_ps!r}") from None
    if centres.ndim != 1 or centres.size < 2 or not np.all(np.isfinite(centres)):
        raise InputError("time_ps must hold at least two finite times [ps]")
    if np.any(centres < 0) or np.any(np.diff(centres) <= 0):
        raise InputError("time_ps must be >= 0 and strictly increasing [ps]")
    return _midpoint_edges(centres)


def specular_reflectance(*, n, n_outside=1.0, n_slide=None) -> float:
    """Reflectance of a normal beam entering the medium, through an optional slide.

    Parameters
    ----------
    n, n_outside : float
        Indices of the medium and of the outside.
    n_slide : float or None
        Index of a non-absorbing slide on the entry face, or None.

    Returns
    -------
    float
        ((n_out − n)/(n_out + n))² without a slide (Fresnel at normal incidence, Born & Wolf
        §1.5.2); with a slide, r₁ + (1 − r₁)² r₂ / (1 − r₁ r₂) for the two interfaces.
    """
    n = check_index("n", n)
    n_outside = check_index("n_outside", n_outside)
    if n_slide is None:
        return float(_kernels.fresnel_reflectance(n_outside, n, 1.0))
    n_slide = check_index("n_slide", n_slide)
    r1 = float(_kernels.fresnel_reflectance(n_outside, n_slide, 1.0))
    r2 = float(_kernels.fresnel_reflectance(n_slide, n, 1.0))
    return r1 + (1.0 - r1) ** 2 * r2 / (1.0 - r1 * r2)
