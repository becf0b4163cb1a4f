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
In a slab at late times the same depth sums come from the eigenfunction (sine) series of the
slab between its extrapolated boundaries (Carslaw & Jaeger 1959, §14.2), which converges
fast where the images converge slowly; the two are one function (Poisson's summation).
Time t = 0 is the moment the pulse enters; for t ≤ 0 the value is 0.

The named models built on these sums (which D, z0 and z_e, and whether the light leaving is
the flux or the fluence plus the flux) are in :mod:`phantomlab.transport.time_domain`.

References
----------
Patterson MS, Chance B, Wilson BC 1989, Appl Opt 28:2331–2336, doi:10.1364/AO.28.002331.
Contini D, Martelli F, Zaccanti G 1997, Appl Opt 36:4587–4599, doi:10.1364/AO.36.004587.
Carslaw HS, Jaeger JC 1959, *Conduction of Heat in Solids*, 2nd ed., Oxford (the slab's
eigenfunction series).
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
#: In a slab, from this diffusion time a = π² D v t/L² (L = s + 2z_e) on the depth sums come
#: from the eigenfunction series (at most 11 terms there) instead of the images (which need
#: up to three pairs before it and ever more after); the two agree to rounding
#: (tests/transport/test_time_domain_series.py).
SINE_SERIES_FROM = 0.35


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
    et al. 1997, eqs. 36–37), per unit energy that *entered* (a unit source at z0).  The sums
    over the images depend on depth and time only; they are formed on the broadcast shape of
    (d, v, z0, zb, t) and then multiplied by the lateral and absorption factor, so a caller
    that gives ``r`` an axis of its own (several distances at the same times) pays for the
    images once.  In a slab, late times take the same sums from the eigenfunction series
    (:func:`_sine_sums`), which needs fewer terms there.

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
        Image pairs on each side of m = 0 that the latest time needs (see
        :func:`image_sources`); earlier times use fewer.

    Returns
    -------
    (ndarray, ndarray)
        Φ and J, the broadcast shape of the arguments.
    """
    d, v, mua, z0, zb, r, t = (np.asarray(x, dtype=float) for x in (d, v, mua, z0, zb, r, t))
    depth_shape = np.broadcast_shapes(d.shape, v.shape, z0.shape, zb.shape, t.shape) or (1,)  # (1,): scalars
    live = t > 0
    safe_t = np.where(live, t, 1.0)
    four_dvt = 4.0 * d * v * safe_t
    if thickness is None:  # the half-space: the one pair m = 0, formed on the broadcast shape
        positive, negative = z0, -2.0 * zb - z0
        if geometry == "transmittance":
            raise InputError("transmittance needs a slab thickness")
        e_pos = np.exp(-positive**2 / four_dvt)
        e_neg = np.exp(-negative**2 / four_dvt)
        sum_fluence = np.broadcast_to(e_pos - e_neg, depth_shape)
        sum_flux = np.broadcast_to((positive * e_pos - negative * e_neg) / (2.0 * safe_t), depth_shape)
        return _with_lateral(sum_fluence, sum_flux, four_dvt, v, mua, r, safe_t, live, depth_shape)
    sum_fluence = np.zeros(depth_shape)
    sum_flux = np.zeros(depth_shape)
    length = float(thickness) + 2.0 * zb
    diffusion_time = np.broadcast_to(np.pi**2 * d * v * safe_t / length**2, depth_shape)
    image = diffusion_time < SINE_SERIES_FROM
    args = [np.broadcast_to(x, depth_shape) for x in (d, v, z0, zb, safe_t)]
    if np.any(image):
        picked = [x[image] for x in args]
        # the early times need fewer pairs than the latest one
        spread = np.sqrt(4.0 * picked[0] * picked[1] * picked[4] * SERIES_EXPONENT).max()
        pairs_here = min(pairs, int(np.ceil(spread / (2.0 * float(thickness)))) + 1)
        sum_fluence[image], sum_flux[image] = _image_sums(*picked, thickness=thickness, geometry=geometry,
                                                          pairs=pairs_here)
    if not np.all(image):
        sum_fluence[~image], sum_flux[~image] = _sine_sums(d, v, z0, zb, safe_t, diffusion_time, ~image,
                                                           thickness=float(thickness), geometry=geometry)
    return _with_lateral(sum_fluence, sum_flux, four_dvt, v, mua, r, safe_t, live, depth_shape)


def _with_lateral(sum_fluence, sum_flux, four_dvt, v, mua, r, safe_t, live, depth_shape):
    """Φ and J from the depth sums: times (4π D v t)^(−3/2) e^(−μa v t − ρ²/(4Dvt)), 0 for t <= 0."""
    if depth_shape == (1,):
        sum_fluence, sum_flux = sum_fluence.reshape(np.shape(four_dvt)), sum_flux.reshape(np.shape(four_dvt))
    # log of (4π D v t)^(−3/2) e^(−μa v t − ρ²/(4Dvt)): kept in logs so that t → 0 gives 0, not inf·0
    log_base = -1.5 * np.log(np.pi * four_dvt) - mua * v * safe_t - r * r / four_dvt
    with np.errstate(over="ignore", invalid="ignore"):
        base = np.exp(log_base)
        fluence = v * base * sum_fluence
        flux = base * sum_flux
    fluence = np.where(live, fluence, 0.0)
    flux = np.where(live, flux, 0.0)
    return fluence, flux


def _image_sums(d, v, z0, zb, t, *, thickness, geometry, pairs):
    """Σₘ (e⁺ − e⁻) and Σₘ (z⁺ e⁺ − z⁻ e⁻)/(2t) of the images, e = exp(−distance²/(4Dvt)) (1-D arrays)."""
    positive, negative = image_sources(z0_mm=z0, zb_mm=zb, thickness_mm=thickness, pairs=pairs)
    if geometry == "transmittance":
        positive, negative = thickness - positive, thickness - negative
    four_dvt = (4.0 * d * v * t)[:, None]
    e_pos = np.exp(-positive**2 / four_dvt)
    e_neg = np.exp(-negative**2 / four_dvt)
    return np.sum(e_pos - e_neg, axis=-1), np.sum(positive * e_pos - negative * e_neg, axis=-1) / (2.0 * t)


def _sine_sums(d, v, z0, zb, t, diffusion_time, late, *, thickness, geometry):
    """The same sums as :func:`_image_sums` from the eigenfunction series of the slab, at ``late``.

    With zero fluence at z = −z_e and z = s + z_e (length L = s + 2z_e) the depth part of the
    Green's function is G(z, t) = (2/L) Σₙ sin(kₙ(z0 + z_e)) sin(kₙ(z + z_e)) exp(−kₙ² D v t),
    kₙ = nπ/L (Carslaw & Jaeger 1959, §14.2; its images are the sum over m by Poisson's
    summation formula).  The image sums are √(4πDvt)·G on the face and ∓D v √(4πDvt) ∂G/∂z
    (the outward flux).  Terms are summed while (n² − 1)·a, a = π²Dvt/L², stays within
    :data:`SERIES_EXPONENT` + 4 of the first at the smallest a asked for.  The sines and
    cosines depend on the depths only (formed on their own shape, not per time); exp(−n²a)
    by the recurrence exp(−(n+1)²a) = exp(−n²a)·exp(−(2n+1)a).

    Parameters
    ----------
    d, v, z0, zb, t : arrays broadcasting to ``late.shape``
    diffusion_time : ndarray, the shape of ``late``
        a = π²Dvt/L².
    late : ndarray of bool
        Where the sums are wanted (a >= :data:`SINE_SERIES_FROM`); returns 1-D arrays of those
        elements.
    """
    face = 0.0 if geometry == "reflectance" else thickness
    sign = 1.0 if geometry == "reflectance" else -1.0
    length = thickness + 2.0 * zb
    a = np.where(late, diffusion_time, np.inf)  # the early elements are not summed here: no terms
    terms = int(math.ceil(math.sqrt(1.0 + (SERIES_EXPONENT + 4.0) / float(a.min()))))
    step = np.exp(-a)  # exp(−(2n−1)a), advanced by exp(−2a)
    twice = step * step
    power = np.ones(a.shape)  # exp(−n²a), n = 0
    sum_fluence = np.zeros(a.shape)
    sum_flux = np.zeros(a.shape)
    for n in range(1, terms + 1):
        power = power * step
        step = step * twice
        k = n * np.pi / length
        source = np.sin(k * (z0 + zb))
        sum_fluence += source * np.sin(k * (face + zb)) * power
        sum_flux += source * k * np.cos(k * (face + zb)) * power
    root = np.sqrt(4.0 * np.pi * d * v * t) * 2.0 / length
    return (root * sum_fluence)[late], np.broadcast_to(sign * d * v * root * sum_flux, late.shape)[late]
