"""Image-source solution of the time-resolved diffusion equation in a half-space or a slab (layer 2).

A short pulse (a delta in time) enters the top face z = 0 of a homogeneous medium (μa, μs′,
index ``n``) normally; the first reduced interaction at depth z0 is an isotropic point
source, and the photon density diffuses with diffusion coefficient D at the speed of light in
the medium v = c/n.  The fluence rate of a unit impulse source in an infinite medium is

    Φ∞(r, t) = v (4π D v t)^(−3/2) exp(−r²/(4 D v t) − μa v t)        (Patterson et al. 1989, eq. 3)

and the boundaries are met by images: zero fluence at z = −z_e and z = s + z_e for a slab
of thickness s (z_e = 0: zero fluence on the real surfaces).

Image positions (Contini et al. 1997, eq. 35, written with s + 2z_e as the period): positive
sources at z⁺ₘ = 2m(s + 2z_e) + z0 and negative ones at z⁻ₘ = 2m(s + 2z_e) − 2z_e − z0,
m = 0, ±1, ±2, ...; the half-space is the m = 0 pair.  At the top face (z = 0, outward −z)
and the bottom face (z = s, outward +z):

    J_R(ρ, t) = (4πDv)^(−3/2) t^(−5/2) e^(−μa v t − ρ²/(4Dvt)) · ½ Σₘ [z⁺ₘ e^(−z⁺ₘ²/(4Dvt)) − z⁻ₘ e^(−z⁻ₘ²/(4Dvt))]
    J_T(ρ, t) = (4πDv)^(−3/2) t^(−5/2) e^(−μa v t − ρ²/(4Dvt)) · ½ Σₘ [(s − z⁺ₘ) e^(−(s − z⁺ₘ)²/(4Dvt)) − (s − z⁻ₘ) e^(−(s − z⁻ₘ)²/(4Dvt))]

which are Contini's eqs. 37 and 36 (his z₃,ₘ = −z⁺ₘ, z₄,ₘ = −z⁻ₘ, z₁,ₘ = s − z⁺ₘ,
z₂,ₘ = s − z⁻ₘ).  The series is summed until the next term is below e^(−36) of the first.
Time t = 0 is the moment the pulse enters; for t ≤ 0 the value is 0.

The named models built on these sums (which D, z0 and z_e, and whether the light leaving is
the flux or the fluence plus the flux) are in :mod:`phantomlab.transport.time_domain`.

References
----------
Patterson MS, Chance B, Wilson BC 1989, Appl Opt 28:2331–2336, doi:10.1364/AO.28.002331.
Contini D, Martelli F, Zaccanti G 1997, Appl Opt 36:4587–4599, doi:10.1364/AO.36.004587.
"""

from __future__ import annotations

import math

import numpy as np

from phantomlab.errors import InputError
from phantomlab.transport.arguments import as_index

__all__ = [
    "SPEED_OF_LIGHT_MM_PER_PS",
    "GEOMETRIES",
    "SERIES_EXPONENT",
    "MAX_IMAGE_PAIRS",
    "light_speed_mm_per_ps",
    "checked_thickness",
    "checked_time_grid",
    "image_sources",
    "image_series_terms",
]

#: Speed of light in vacuum [mm/ps] (exact: 299 792 458 m/s, SI definition of the metre).
SPEED_OF_LIGHT_MM_PER_PS = 0.299792458

#: Measurement geometries: light leaving the top face (the entry face) or the bottom face.
GEOMETRIES = ("reflectance", "transmittance")

#: Image pairs are summed until exp(−(distance)²/(4Dvt)) of the next one falls below e^(−36).
SERIES_EXPONENT = 36.0
#: Most image pairs on each side (a slab thinner than a transport length at long times).
MAX_IMAGE_PAIRS = 2000


def light_speed_mm_per_ps(n) -> np.ndarray:
    """Speed of light in a medium of index ``n`` [mm/ps]: c/n."""
    return SPEED_OF_LIGHT_MM_PER_PS / np.asarray(as_index(n, "n"), dtype=float)


def checked_thickness(thickness_mm, geometry: str) -> float | None:
    """The slab thickness [mm] for a geometry, or None for a half-space.

    Parameters
    ----------
    thickness_mm : float or None [mm]
        Finite and > 0; None for a half-space (reflectance only).
    geometry : {'reflectance', 'transmittance'}

    Raises
    ------
    InputError
        An unknown geometry, transmittance without a thickness, or a thickness that is not a
        finite positive number.
    """
    if geometry not in GEOMETRIES:
        raise InputError(f"unknown geometry {geometry!r}; valid: {', '.join(GEOMETRIES)}")
    if thickness_mm is None:
        if geometry == "transmittance":
            raise InputError("transmittance needs a slab: give thickness_mm > 0 [mm]")
        return None
    try:
        value = float(thickness_mm)
    except (TypeError, ValueError):
        raise InputError(f"thickness_mm: expected a number in mm, got {thickness_mm!r}") from None
    if not math.isfinite(value) or value <= 0:
        raise InputError(f"thickness_mm must be finite and > 0 [mm] (None: half-space), got {thickness_mm!r}")
    return value


def checked_time_grid(time_ps) -> np.ndarray:
    """Times after the pulse entered [ps] as a float array; infinite values are refused."""
    try:
        values = np.asarray(time_ps, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"time_ps: expected numbers in ps, got {time_ps!r}") from None
    if np.any(np.isinf(values)):
        raise InputError("time_ps must be finite [ps]")
    return values


def image_sources(*, z0_mm, zb_mm, thickness_mm, pairs: int):
    """Depths of the positive and negative image sources [mm] (Contini et al. 1997, eq. 35).

    Parameters
    ----------
    z0_mm, zb_mm : float or array (S) [mm]
        Source depth and extrapolation distance.
    thickness_mm : float or None [mm]
        Slab thickness; None for a half-space (only the m = 0 pair).
    pairs : int
        Image pairs on each side of m = 0 (ignored for a half-space).

    Returns
    -------
    (ndarray, ndarray)
        z⁺ₘ and z⁻ₘ of shape S + (M,), m = −pairs..pairs (M = 2 pairs + 1; 1 for a half-space).
    """
    z0 = np.asarray(z0_mm, dtype=float)[..., None]
    zb = np.asarray(zb_mm, dtype=float)[..., None]
    if thickness_mm is None:
        m = np.zeros(1)
        period = np.zeros_like(z0)
    else:
        m = np.arange(-pairs, pairs + 1, dtype=float)
        period = 2.0 * (float(thickness_mm) + 2.0 * zb)
    positive = m * period + z0
    negative = m * period - 2.0 * zb - z0
    return positive, negative


def image_series_terms(*, d, v, mua, z0, zb, r, t, thickness, geometry, pairs):
    """Fluence rate Φ and outward flux J of the image series on one face [1/(mm² ps)].

    Every argument is broadcast element by element (no outer product): Φ = v Σₘ (Φ∞ of the
    positive image − Φ∞ of the negative one), J the sums of the module docstring (Contini
    et al. 1997, eqs. 36–37), per unit energy that *entered* (a unit source at z0).

    Parameters
    ----------
    d, v, mua, z0, zb : float or array
        Diffusion coefficient [mm], speed in the medium [mm/ps], absorption [1/mm], source
        depth [mm] and extrapolation distance [mm] (0: zero fluence on the surface).
    r, t : float or array
        Distance from the beam axis [mm] and time after the pulse entered [ps]; t <= 0 gives 0.
    thickness : float or None [mm]
        Slab thickness; None for a half-space.
    geometry : {'reflectance', 'transmittance'}
        The top face (z = 0) or the bottom face (z = s).
    pairs : int
        Image pairs on each side of m = 0 (see :func:`image_sources`).

    Returns
    -------
    (ndarray, ndarray)
        Φ and J, the broadcast shape of the arguments.
    """
    positive, negative = image_sources(z0_mm=z0, zb_mm=zb, thickness_mm=thickness, pairs=pairs)
    if geometry == "transmittance":
        positive, negative = thickness - positive, thickness - negative
    live = t > 0
    safe_t = np.where(live, t, 1.0)
    four_dvt = 4.0 * d * v * safe_t
    # log of (4π D v t)^(−3/2) e^(−μa v t − ρ²/(4Dvt)): kept in logs so that t → 0 gives 0, not inf·0
    log_base = -1.5 * np.log(np.pi * four_dvt) - mua * v * safe_t - r * r / four_dvt
    with np.errstate(over="ignore", invalid="ignore"):
        e_pos = np.exp(log_base[..., None] - positive**2 / four_dvt[..., None])
        e_neg = np.exp(log_base[..., None] - negative**2 / four_dvt[..., None])
        fluence = v * np.sum(e_pos - e_neg, axis=-1)
        # outward flux D ∂Φ/∂z at the top (−z outward); at the bottom the signs of the
        # distances s − z carry the same form (Contini et al. 1997, eqs. 36-37)
        flux = np.sum(positive * e_pos - negative * e_neg, axis=-1) / (2.0 * safe_t)
    fluence = np.where(live, fluence, 0.0)
    flux = np.where(live, flux, 0.0)
    return fluence, flux
