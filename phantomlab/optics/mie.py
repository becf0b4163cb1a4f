"""Mie scattering of sphere ensembles (layer 2): size-distribution averages, one call.

The efficiencies come from a Mie engine of :data:`MIE_ENGINES`, all with the sign
convention m = n − i k (absorbing particles have a negative imaginary part):

* ``"numpy"`` (default) — :func:`phantomlab.optics.mie_series.mie_efficiencies`, the Mie
  series evaluated for the whole flattened (wavelength × size) grid at once;
* ``"miepython"`` — one call of :func:`miepython.efficiencies_mx` on the flattened grid
  (miepython 3.3 loops over the pairs in Python inside that call, so it is ~60× slower;
  kept as the library reference and for cross-checks).

This module wires sizes, indices and units around the engine:

* relative index m(λ) = n_particle(λ) / n_matrix(λ) at each wavelength;
* size parameter x = π d n_matrix(λ) / λ₀, i.e. with the wavelength in the matrix;
* one engine call on the flattened (wavelength × size) grid;
* number-weighted averages over the size nodes: cross sections C = Q π d²/4, volumes
  V = π d³/6, μs = f ⟨Csca⟩/⟨V⟩, μa = f ⟨Cabs⟩/⟨V⟩, g = ⟨Csca g⟩/⟨Csca⟩ for a particle
  volume fraction f (independent scattering; for one size μs = 1.5 f Qsca / d).

References
----------
1. Bohren, C. F. & Huffman, D. R. (1983). Absorption and Scattering of Light by Small
   Particles. Wiley. Ch. 4 (Mie theory); eq. 4.61 (size parameter in the medium).
2. Prahl, S. miepython (registry package), efficiencies_mx.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from phantomlab.errors import InputError

__all__ = ["EnsembleOptics", "MIE_ENGINES", "sphere_ensemble_optics", "sphere_ensemble_optics_naive"]


def _engine_numpy(m, x):
    from phantomlab.optics.mie_series import mie_efficiencies

    return mie_efficiencies(m, x)


def _engine_miepython(m, x):
    import miepython

    qext, qsca, _qback, g = miepython.efficiencies_mx(m, x)
    return qext, qsca, g


#: Mie engines by name: ``engine(m, x) -> (qext, qsca, g)`` for flattened arrays.
MIE_ENGINES = {"numpy": _engine_numpy, "miepython": _engine_miepython}


@dataclass(frozen=True)
class EnsembleOptics:
    """Optics of a sphere ensemble at particle volume fraction ``volume_fraction``.

    Attributes
    ----------
    wavelength_nm : ndarray [nm]
    mua_per_mm : ndarray [1/mm]
        Particle absorption (0 for a real particle index).
    mus_per_mm : ndarray [1/mm]
    g : ndarray
    qsca_mean : ndarray
        Cross-section-weighted mean efficiency ⟨Csca⟩/⟨πd²/4⟩ (diagnostic).
    """

    wavelength_nm: np.ndarray
    mua_per_mm: np.ndarray
    mus_per_mm: np.ndarray
    g: np.ndarray
    qsca_mean: np.ndarray


def _inputs(wavelength_nm, particle_index, matrix_index, diameters_um, number_weights):
    wavelength = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
    if wavelength.ndim != 1 or not np.all(np.isfinite(wavelength)) or np.any(wavelength <= 0):
        raise InputError("Mie: wavelength_nm must be a 1-D array of finite numbers > 0 nm")
    n_particle = np.broadcast_to(np.asarray(particle_index, dtype=complex), wavelength.shape)
    n_matrix = np.broadcast_to(np.asarray(matrix_index, dtype=float), wavelength.shape)
    if np.any(~np.isfinite(n_matrix)) or np.any(n_matrix <= 0):
        raise InputError("Mie: matrix index must be finite and > 0")
    if np.any(~np.isfinite(n_particle)) or np.any(n_particle.real <= 0) or np.any(n_particle.imag > 0):
        raise InputError("Mie: particle index must be finite, real part > 0, imaginary part <= 0 (m = n - ik)")
    d = np.atleast_1d(np.asarray(diameters_um, dtype=float))
    w = np.atleast_1d(np.asarray(number_weights, dtype=float))
    if d.shape != w.shape or d.ndim != 1 or np.any(d <= 0) or np.any(w < 0) or w.sum() <= 0:
        raise InputError("Mie: diameters must be > 0 µm with one weight >= 0 each (not all zero)")
    return wavelength, n_particle, n_matrix, d, w / w.sum()


def _average(wavelength, d_um, w, qext, qsca, gsca, volume_fraction):
    d_mm = d_um / 1000.0
    area = np.pi * d_mm**2 / 4.0  # geometric cross section [mm²]
    volume = float(np.sum(w * np.pi * d_mm**3 / 6.0))  # ⟨V⟩ [mm³]
    csca = qsca * area  # (W, S) [mm²]
    cabs = (qext - qsca) * area
    mean_csca = csca @ w
    mean_cabs = cabs @ w
    mus = volume_fraction * mean_csca / volume
    mua = np.clip(volume_fraction * mean_cabs / volume, 0.0, None)
    g = np.divide((csca * gsca) @ w, mean_csca, out=np.zeros_like(mean_csca), where=mean_csca > 0)
    qmean = mean_csca / float(np.sum(w * area))
    return EnsembleOptics(wavelength, mua, mus, g, qmean)


def sphere_ensemble_optics(
    *, wavelength_nm, particle_index, matrix_index, diameters_um, number_weights, volume_fraction=1.0,
    engine="numpy",
) -> EnsembleOptics:
    """μa, μs and g of spheres with a size distribution, in one vectorised Mie call.

    Parameters
    ----------
    wavelength_nm : array (W,) [nm]
        Vacuum wavelengths.
    particle_index : float, complex or array (W,) [dimensionless]
        Particle index, n − i k convention.
    matrix_index : float or array (W,) [dimensionless]
        Index of the surrounding matrix (real).
    diameters_um : array (S,) [µm]
        Size nodes.
    number_weights : array (S,)
        Number weight of each node (normalised here).
    volume_fraction : float [dimensionless]
        Particle volume fraction f; the result scales linearly with it.
    engine : str
        A key of :data:`MIE_ENGINES` (``"numpy"`` or ``"miepython"``).

    Returns
    -------
    EnsembleOptics

    References
    ----------
    1. Bohren & Huffman (1983), ch. 4; independent-scattering sum μs = N ⟨Csca⟩ with
       N = f/⟨V⟩ (ch. 3.4).
    """
    try:
        efficiencies = MIE_ENGINES[engine]
    except (KeyError, TypeError):
        raise InputError(f"unknown Mie engine {engine!r}; engines: {', '.join(MIE_ENGINES)}") from None
    wavelength, n_particle, n_matrix, d, w = _inputs(
        wavelength_nm, particle_index, matrix_index, diameters_um, number_weights
    )
    m = (n_particle / n_matrix)[:, None] * np.ones((1, d.size))
    x = np.pi * (d * 1000.0)[None, :] * n_matrix[:, None] / wavelength[:, None]  # BH eq. 4.61, λ in the medium
    qext, qsca, gsca = efficiencies(m.ravel(), x.ravel())
    shape = (wavelength.size, d.size)
    qext = np.asarray(qext, dtype=float).reshape(shape)
    # a real index absorbs nothing: drop the rounding noise of Qext − Qsca (~1e-16 Qsca)
    real = (m.imag == 0)
    qext = np.where(real, np.asarray(qsca, dtype=float).reshape(shape), qext)
    return _average(
        wavelength,
        d,
        w,
        qext,
        np.asarray(qsca, dtype=float).reshape(shape),
        np.asarray(gsca, dtype=float).reshape(shape),
        float(volume_fraction),
    )


def sphere_ensemble_optics_naive(
    *, wavelength_nm, particle_index, matrix_index, diameters_um, number_weights, volume_fraction=1.0
) -> EnsembleOptics:
    """The same as :func:`sphere_ensemble_optics` with one scalar miepython call per (λ, d) pair.

    Kept as the baseline of ``bench/optics.py`` and as a cross-check in the tests.
    """
    import miepython

    wavelength, n_particle, n_matrix, d, w = _inputs(
        wavelength_nm, particle_index, matrix_index, diameters_um, number_weights
    )
    shape = (wavelength.size, d.size)
    qext = np.empty(shape)
    qsca = np.empty(shape)
    gsca = np.empty(shape)
    for i in range(wavelength.size):
        m = complex(n_particle[i] / n_matrix[i])
        for j in range(d.size):
            x = float(np.pi * d[j] * 1000.0 * n_matrix[i] / wavelength[i])
            e, s, _b, g = miepython.efficiencies_mx(m, x)
            qext[i, j], qsca[i, j], gsca[i, j] = float(e), float(s), float(g)
    return _average(wavelength, d, w, qext, qsca, gsca, float(volume_fraction))
