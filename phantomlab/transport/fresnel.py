"""Fresnel reflectance of a plane interface for unpolarised light (layer 2).

Shared by the diffusion boundary coefficients and the adding-doubling boundaries.

References
----------
Born M, Wolf E 1999, *Principles of Optics*, 7th ed., Cambridge University Press, §1.5.2
(Fresnel formulae, eqs. 21a–b for the amplitude ratios).
"""

from __future__ import annotations

import numpy as np

__all__ = ["fresnel_reflectance", "critical_cosine"]


def fresnel_reflectance(*, cos_incident, n_from, n_to):
    """Unpolarised power reflectance of a plane interface.

    Parameters
    ----------
    cos_incident : float or array [dimensionless]
        Cosine of the angle of incidence in the medium of index ``n_from``, in [0, 1].
    n_from, n_to : float or array [dimensionless]
        Refractive indices of the medium the light comes from and goes into.

    Returns
    -------
    ndarray
        R = (R_s + R_p)/2, broadcast over the inputs; 1 beyond the critical angle (total
        internal reflection) and at grazing incidence.

    References
    ----------
    Born & Wolf 1999, *Principles of Optics*, §1.5.2, eqs. (21a)–(21b), squared and averaged.
    """
    ci = np.clip(np.asarray(cos_incident, dtype=float), 0.0, 1.0)
    n1 = np.asarray(n_from, dtype=float)
    n2 = np.asarray(n_to, dtype=float)
    ci, n1, n2 = np.broadcast_arrays(ci, n1, n2)
    sin_t = n1 / n2 * np.sqrt(np.maximum(0.0, 1.0 - ci * ci))
    total = sin_t >= 1.0
    ct = np.sqrt(np.maximum(0.0, 1.0 - sin_t * sin_t))
    with np.errstate(invalid="ignore", divide="ignore"):
        rs = (n1 * ci - n2 * ct) / (n1 * ci + n2 * ct)
        rp = (n1 * ct - n2 * ci) / (n1 * ct + n2 * ci)
        r = 0.5 * (rs * rs + rp * rp)
    r = np.where(total | (ci <= 0.0), 1.0, r)
    r = np.where(np.isnan(ci) | np.isnan(n1) | np.isnan(n2), np.nan, r)
    return r[()] if r.ndim == 0 else r


def critical_cosine(*, n_from, n_to):
    """Cosine of the critical angle in the medium ``n_from``; 0 when there is none.

    Light in ``n_from`` with a direction cosine below this value is totally reflected.
    """
    ratio = np.asarray(n_to, dtype=float) / np.asarray(n_from, dtype=float)
    value = np.sqrt(np.clip(1.0 - ratio * ratio, 0.0, 1.0))
    return value[()] if value.ndim == 0 else value
