"""Spectral corrections of a stock lot's potency: the shape the batch log taught (layer 3).

A potency ``p`` scales a stock's intrinsic optics by one number at every wavelength.  A lot
whose label is wrong in more than its level needs more: a scatterer whose particles are not
the size the label says has a μs′ spectrum of another *slope*, and an absorber made in
another way may have a slightly other *shape*.  A calibrated lot may therefore carry one of
two smooth multiplicative corrections ``h(λ)`` of its intrinsic spectrum, with ``h = 1`` at
the reference wavelength (scatterer) or on average over the band (absorber), so ``p`` keeps
its meaning as the level:

* ``musp_power_law`` — the lot's μs′ (and μs, μs·g: g is kept) times
  ``(λ/λ0)^(−Δb)``: the change of exponent of the empirical power law
  μs′ = a (λ/λ0)^(−b) used for tissue and phantom scatterers (Jacques 2013, Phys. Med. Biol.
  58:R37, eq. 2).  A larger particle flattens the spectrum (Δb < 0), a smaller one steepens
  it (Mie theory; the ratio of two lognormal TiO₂ spectra 0.25 and 0.32 µm follows the power
  law within 0.5 % over 650–860 nm in silicone, ``tests/calibration/test_potency_spectral.py``);
* ``mua_legendre`` — the lot's μa times ``1 + r₁ P₁(u) + r₂ P₂(u)``, Legendre polynomials of
  ``u = (λ − λc)/w`` over the band [λc − w, λc + w] the calibration saw, held constant
  beyond it (``u`` clipped to [−1, 1]): a tilt and a bow, nothing that could invent a peak.

Each correction carries the joint covariance of (p, its coefficients), so the SD of the
corrected potency ``p·h(λ)`` at any wavelength follows by the delta method
(:meth:`SpectralCorrection.relative_sd`); the recipe solver uses the corrected spectra
(:func:`corrected_table`) and these SDs (:func:`potency_sd_by_wavelength`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any, Mapping

import numpy as np

from phantomlab.errors import InputError
from phantomlab.recipe.mixmodel import IntrinsicTable

__all__ = [
    "KINDS",
    "SpectralCorrection",
    "corrected_table",
    "legendre_shape",
    "musp_power_law_shape",
    "potency_sd_by_wavelength",
    "spectral_of",
]

#: The corrections a lot can carry: kind -> (quantity it multiplies, coefficient names).
KINDS: dict[str, tuple[str, tuple[str, ...]]] = {
    "musp_power_law": ("musp", ("delta_b",)),
    "mua_legendre": ("mua", ("r1", "r2")),
}


def musp_power_law_shape(wavelength_nm, *, reference_nm: float, delta_b: float) -> np.ndarray:
    """``(λ/λ0)^(−Δb)`` [dimensionless]: the change of a scatterer's μs′ power-law exponent.

    Parameters
    ----------
    wavelength_nm : array [nm]
    reference_nm : float [nm]
        λ0, where the correction is 1.
    delta_b : float or array [dimensionless]
        Change of the exponent b of μs′ = a (λ/λ0)^(−b) (Jacques 2013, eq. 2); broadcasts
        with ``wavelength_nm``.
    """
    return np.power(np.asarray(wavelength_nm, float) / float(reference_nm), -np.asarray(delta_b, float))


def _legendre_u(wavelength_nm, centre_nm: float, half_width_nm: float) -> np.ndarray:
    return np.clip((np.asarray(wavelength_nm, float) - centre_nm) / half_width_nm, -1.0, 1.0)


def legendre_shape(wavelength_nm, *, centre_nm: float, half_width_nm: float, r1: float, r2: float) -> np.ndarray:
    """``1 + r₁ P₁(u) + r₂ P₂(u)`` with ``u = (λ − λc)/w`` clipped to [−1, 1] [dimensionless].

    P₁(u) = u, P₂(u) = (3u² − 1)/2 (Abramowitz & Stegun 1964, table 22.9); both average to 0
    over the band, so the level of the spectrum stays the potency's.
    """
    u = _legendre_u(wavelength_nm, centre_nm, half_width_nm)
    return 1.0 + r1 * u + r2 * 0.5 * (3.0 * u * u - 1.0)


@dataclass(frozen=True)
class SpectralCorrection:
    """One lot's spectral correction with the joint uncertainty of (potency, coefficients).

    Attributes
    ----------
    kind : str
        A key of :data:`KINDS`.
    reference_nm : float [nm]
        λ0 of ``musp_power_law``; the band centre λc of ``mua_legendre``.
    half_width_nm : float [nm]
        Half-width w of the band of ``mua_legendre`` (0 for ``musp_power_law``).
    coefficients : tuple of float
        (Δb,) or (r₁, r₂).
    potency : float [dimensionless]
        The level p estimated with it.
    covariance : tuple of tuples
        Covariance of (p, coefficients...), (1 + n) × (1 + n), as reported (widened by the
        Birge ratio when the calibration's χ²ᵣ > 1).
    """

    kind: str
    reference_nm: float
    half_width_nm: float
    coefficients: tuple
    potency: float
    covariance: tuple

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise InputError(f"spectral correction kind {self.kind!r}; accepted: {', '.join(KINDS)}")
        names = KINDS[self.kind][1]
        coefficients = tuple(float(c) for c in self.coefficients)
        if len(coefficients) != len(names) or not all(math.isfinite(c) for c in coefficients):
            raise InputError(f"spectral correction {self.kind}: needs finite {', '.join(names)}")
        covariance = np.asarray(self.covariance, float)
        size = 1 + len(names)
        if covariance.shape != (size, size) or not np.all(np.isfinite(covariance)):
            raise InputError(f"spectral correction {self.kind}: covariance must be {size} x {size}, finite")
        if not (math.isfinite(self.reference_nm) and self.reference_nm > 0):
            raise InputError(f"spectral correction {self.kind}: reference_nm {self.reference_nm!r}; accepted: > 0")
        if self.kind == "mua_legendre" and not self.half_width_nm > 0:
            raise InputError("spectral correction mua_legendre: half_width_nm must be > 0")
        object.__setattr__(self, "coefficients", coefficients)
        object.__setattr__(self, "covariance", tuple(tuple(float(v) for v in row) for row in covariance))

    @property
    def quantity(self) -> str:
        """``"musp"`` or ``"mua"``: the part of the stock's optics the correction multiplies."""
        return KINDS[self.kind][0]

    @property
    def names(self) -> tuple[str, ...]:
        return KINDS[self.kind][1]

    def shape(self, wavelength_nm) -> np.ndarray:
        """h(λ) [dimensionless]."""
        if self.kind == "musp_power_law":
            return musp_power_law_shape(wavelength_nm, reference_nm=self.reference_nm, delta_b=self.coefficients[0])
        r1, r2 = self.coefficients
        return legendre_shape(wavelength_nm, centre_nm=self.reference_nm, half_width_nm=self.half_width_nm,
                              r1=r1, r2=r2)

    def jacobian(self, wavelength_nm) -> np.ndarray:
        """∂(p·h)/∂(p, coefficients) at every wavelength, shape (W, 1 + n)."""
        wavelength = np.atleast_1d(np.asarray(wavelength_nm, float))
        h = self.shape(wavelength)
        if self.kind == "musp_power_law":
            extra = [-np.log(wavelength / self.reference_nm) * self.potency * h]
        else:
            u = _legendre_u(wavelength, self.reference_nm, self.half_width_nm)
            extra = [self.potency * u, self.potency * 0.5 * (3.0 * u * u - 1.0)]
        return np.column_stack([h, *extra])

    def relative_sd(self, wavelength_nm) -> np.ndarray:
        """SD of p·h(λ) over p·h(λ) [fraction], delta method with the joint covariance."""
        wavelength = np.atleast_1d(np.asarray(wavelength_nm, float))
        jac = self.jacobian(wavelength)
        variance = np.einsum("wi,ij,wj->w", jac, np.asarray(self.covariance), jac)
        return np.sqrt(np.maximum(variance, 0.0)) / (self.potency * self.shape(wavelength))

    def coefficient_sd(self) -> tuple[float, ...]:
        cov = np.asarray(self.covariance)
        return tuple(float(math.sqrt(max(cov[i, i], 0.0))) for i in range(1, cov.shape[0]))

    def correlation_with_potency(self) -> tuple[float, ...]:
        cov = np.asarray(self.covariance)
        out = []
        for i in range(1, cov.shape[0]):
            denominator = math.sqrt(max(cov[0, 0] * cov[i, i], 0.0))
            out.append(float(cov[0, i] / denominator) if denominator > 0 else 0.0)
        return tuple(out)

    def with_potency(self, potency: float, potency_sd: float | None = None) -> "SpectralCorrection":
        """The same correction for a potency read back from a store (covariance rescaled)."""
        cov = np.array(self.covariance)
        if potency_sd is not None and cov[0, 0] > 0:
            scale = potency_sd / math.sqrt(cov[0, 0])
            cov[0, :] *= scale
            cov[:, 0] *= scale
        return replace(self, potency=float(potency), covariance=tuple(map(tuple, cov)))

    def describe(self) -> str:
        """One line for a person: the correction, its SD and what it does at the band edges."""
        sds = self.coefficient_sd()
        if self.kind == "musp_power_law":
            return (f"μs′ × (λ/{self.reference_nm:g} nm)^(−Δb), Δb = {self.coefficients[0]:+.3f} ± {sds[0]:.3f}")
        return (f"μa × (1 + r₁P₁ + r₂P₂) over {self.reference_nm - self.half_width_nm:g}–"
                f"{self.reference_nm + self.half_width_nm:g} nm, r₁ = {self.coefficients[0]:+.3f} ± {sds[0]:.3f}, "
                f"r₂ = {self.coefficients[1]:+.3f} ± {sds[1]:.3f}")

    def to_json(self) -> dict[str, Any]:
        return {
            "kind": self.kind,
            "quantity": self.quantity,
            "reference_nm": self.reference_nm,
            "half_width_nm": self.half_width_nm,
            "coefficients": dict(zip(self.names, self.coefficients)),
            "coefficient_sd": dict(zip(self.names, self.coefficient_sd())),
            "correlation_with_potency": dict(zip(self.names, self.correlation_with_potency())),
            "potency": self.potency,
            "covariance": [list(row) for row in self.covariance],
            "text": self.describe(),
        }

    @classmethod
    def from_json(cls, data: Mapping[str, Any]) -> "SpectralCorrection":
        """Read back :meth:`to_json` (extra keys such as ``delta_bic`` are ignored)."""
        try:
            kind = str(data["kind"])
            names = KINDS[kind][1] if kind in KINDS else ()
            coefficients = data["coefficients"]
            values = [coefficients[n] for n in names] if isinstance(coefficients, Mapping) else list(coefficients)
            return cls(kind=kind, reference_nm=float(data["reference_nm"]),
                       half_width_nm=float(data.get("half_width_nm") or 0.0), coefficients=tuple(values),
                       potency=float(data["potency"]), covariance=tuple(map(tuple, data["covariance"])))
        except (KeyError, TypeError, ValueError):
            raise InputError("a spectral correction needs kind, reference_nm, coefficients, potency and "
                             "covariance") from None


def spectral_of(entry) -> SpectralCorrection | None:
    """The spectral correction of a potency entry (a 4th tuple element or a ``spectral`` attribute)."""
    value = getattr(entry, "spectral", None)
    if value is None and isinstance(entry, (tuple, list)) and len(entry) >= 4:
        value = entry[3]
    if value is None:
        return None
    if isinstance(value, SpectralCorrection):
        return value
    if isinstance(value, Mapping):
        return SpectralCorrection.from_json(value)
    raise InputError(f"spectral correction {value!r}: expected a mapping or SpectralCorrection")


def corrected_table(table: IntrinsicTable, corrections: Mapping[str, SpectralCorrection]) -> IntrinsicTable:
    """The intrinsic table with each corrected stock's μs (hence μs′, μs·g) or the ingredient part of
    its μa (not the carrier's) times h(λ)."""
    if not corrections:
        return table
    mua = table.mua_per_mm.copy()
    mus = table.mus_per_mm.copy()
    for key, correction in corrections.items():
        if key not in table.stock_keys:
            continue
        i = table.index_of(key)
        shape = correction.shape(table.wavelength_nm)
        if correction.quantity == "musp":
            mus[i] = mus[i] * shape
        else:  # the ingredient's absorption bends; its carrier water or solvent does not
            carrier = table.mua_carrier_per_mm[i]
            mua[i] = carrier + (mua[i] - carrier) * shape
    return replace(table, mua_per_mm=mua, mus_per_mm=mus)


def potency_sd_by_wavelength(table: IntrinsicTable, *, potencies, potency_sd,
                             corrections: Mapping[str, SpectralCorrection]) -> dict[str, np.ndarray] | None:
    """SD of each stock's effective potency at every wavelength, for μa and for μs′.

    Returns
    -------
    dict or None
        ``{"mua": (S, W), "musp": (S, W)}`` [dimensionless]; None without corrections (then
        the scalar ``potency_sd`` holds everywhere).  A corrected quantity gets
        ``p · relative_sd(λ)`` of its correction; the other quantity the scalar SD.
    """
    if not corrections:
        return None
    p = np.asarray(potencies, float)
    sd = np.asarray(potency_sd, float)
    shape = (len(table.stock_keys), table.wavelength_nm.size)
    out = {"mua": np.broadcast_to(sd[:, None], shape).copy(), "musp": np.broadcast_to(sd[:, None], shape).copy()}
    for key, correction in corrections.items():
        if key not in table.stock_keys:
            continue
        i = table.index_of(key)
        out[correction.quantity][i] = p[i] * correction.relative_sd(table.wavelength_nm)
    return out
