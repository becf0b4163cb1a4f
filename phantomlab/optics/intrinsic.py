"""Intrinsic optics of a stock (layer 2): μa, μs, g per volume fraction of the stock.

"Intrinsic" means per unit volume fraction of the *undiluted* stock in the final mix: a
dose of volume fraction f adds f·μa and f·μs (independent scattering; the mixing rule in
:mod:`phantomlab.optics.mixing` sums the doses).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.materials.refractive_index import refractive_index
from phantomlab.materials.stock import Stock
from phantomlab.materials.solvents import (
    ETHANOL_KEDENBURG2012_BAND_NM,
    LIPID_VANVEEN2004_BAND_NM,
    ethanol_absorption_Kedenburg2012,
    lipid_absorption_vanVeen2004,
)
from phantomlab.materials.water import water_absorption_at_temperature
from phantomlab.optics.dependent import AngularScattering, angular_scattering
from phantomlab.optics.emulsion import EMULSION_SCATTERING
from phantomlab.optics.mie import sphere_ensemble_optics

__all__ = ["IntrinsicOptics", "intrinsic_optics", "stock_angular_scattering", "wavelength_grid", "LOW_CONTRAST"]

#: |m − 1| below which Mie scattering is very sensitive to the matrix index (e.g. silica in
#: silicone, FIELD notes).  Common practice, no source.
LOW_CONTRAST = 0.05


def wavelength_grid(wavelength_nm) -> np.ndarray:
    """Check a wavelength grid: 1-D, finite, > 0 nm.  A scalar becomes a 1-element array."""
    try:
        grid = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
    except (TypeError, ValueError):
        raise InputError(f"wavelength_nm must be numbers in nm, got {wavelength_nm!r}") from None
    if grid.ndim != 1 or grid.size == 0:
        raise InputError("wavelength_nm must be a number or a 1-D list of numbers [nm]")
    if not np.all(np.isfinite(grid)):
        raise InputError("wavelength_nm holds NaN or infinite values; give finite wavelengths in nm")
    if np.any(grid <= 0):
        raise InputError(f"wavelength_nm must be > 0 nm, got {grid.min():g}")
    return grid


@dataclass(frozen=True)
class IntrinsicOptics:
    """Optics of one stock per unit volume fraction of it in the final mix.

    Attributes
    ----------
    stock : Stock or str
        The stock (or its key, when built by hand).
    wavelength_nm : ndarray [nm]
    mua_per_mm : ndarray [1/mm]
    mus_per_mm : ndarray [1/mm]
    g : ndarray [dimensionless]
        0 where μs = 0.
    solids_volume_fraction : float
        Particle volume fraction inside the undiluted stock (for the independent-scattering
        check of the mixing rule); taken from ``stock`` when it is a :class:`Stock`.
    mua_sd_per_mm : ndarray [1/mm]
        SD of μa from the stock's own data (a cuvette fit; 0 otherwise).  The potency SD is
        not included: it is the stock's ``potency_sd``.
    mua_carrier_per_mm : ndarray [1/mm]
        The part of ``mua_per_mm`` that the potency does not scale: the carrier water of a
        suspension or emulsion, the solvent of an absorber stock (0 for matrices and powders).
    """

    stock: Any
    wavelength_nm: np.ndarray
    mua_per_mm: np.ndarray
    mus_per_mm: np.ndarray
    g: np.ndarray
    solids_volume_fraction: float | None = None
    mua_sd_per_mm: np.ndarray | None = field(default=None)
    mua_carrier_per_mm: np.ndarray | None = field(default=None)

    def __post_init__(self) -> None:
        grid = wavelength_grid(self.wavelength_nm)
        grid.setflags(write=False)
        object.__setattr__(self, "wavelength_nm", grid)
        for name in ("mua_per_mm", "mus_per_mm", "g"):
            values = np.broadcast_to(np.asarray(getattr(self, name), dtype=float), grid.shape).copy()
            values.setflags(write=False)
            object.__setattr__(self, name, values)
        for name in ("mua_sd_per_mm", "mua_carrier_per_mm"):
            given = getattr(self, name)
            values = np.broadcast_to(np.asarray(0.0 if given is None else given, dtype=float), grid.shape).copy()
            values.setflags(write=False)
            object.__setattr__(self, name, values)
        if self.solids_volume_fraction is None:
            solids = getattr(self.stock, "solids_volume_fraction", 0.0)
            object.__setattr__(self, "solids_volume_fraction", float(solids))
        if np.any(self.mua_per_mm < 0) or np.any(self.mus_per_mm < 0):
            raise InputError(f"intrinsic optics of {self.stock_key}: mua_per_mm and mus_per_mm must be >= 0")
        if np.any(np.abs(self.g) >= 1):
            raise InputError(f"intrinsic optics of {self.stock_key}: g must lie in (-1, 1)")

    @property
    def stock_key(self) -> str:
        """The stock's key."""
        return getattr(self.stock, "key", str(self.stock))

    @property
    def musp_per_mm(self) -> np.ndarray:
        """Reduced scattering μs′ = μs (1 − g) [1/mm]."""
        return self.mus_per_mm * (1.0 - self.g)

    def to_json(self) -> dict:
        """The keys of ``phantomlab stock optics --json``."""
        return {
            "stock": self.stock_key,
            "wavelength_nm": self.wavelength_nm,
            "mua_per_mm": self.mua_per_mm,
            "mus_per_mm": self.mus_per_mm,
            "g": self.g,
            "musp_per_mm": self.musp_per_mm,
        }


def _interpolate_spectrum(key: str, field_name: str, table_nm, values, grid) -> np.ndarray:
    lo, hi = float(table_nm[0]), float(table_nm[-1])
    if grid.min() < lo - 1e-9 or grid.max() > hi + 1e-9:
        raise InputError(
            f"stock {key}: {field_name} covers {lo:g}–{hi:g} nm; asked {grid.min():g}–{grid.max():g} nm"
        )
    return np.interp(grid, table_nm, values)


def _water(grid, fraction, source, temperature_c) -> np.ndarray:
    if fraction == 0:
        return np.zeros_like(grid)
    return fraction * water_absorption_at_temperature(grid, source=source, temperature_c=temperature_c)


def _matrix_background(stock: Stock, grid, temperature_c) -> np.ndarray:
    spec = stock.spec
    if spec.background_spectrum is not None:
        cols = spec.background_spectrum.columns
        return _interpolate_spectrum(stock.key, "spectrum_csv", cols["wavelength_nm"], cols["mua_per_mm"], grid)
    return _water(grid, spec.water_volume_fraction, spec.water_source, temperature_c) + spec.background_mua_per_mm


def _within_table(stock: Stock, grid, band, function, what: str, table: str) -> np.ndarray:
    """A liquid's tabulated absorption on the grid; left out (0, with a warning) outside its table."""
    lo, hi = band
    inside = (grid >= lo) & (grid <= hi)
    if not np.all(inside):
        outside = grid[~inside]
        span = f"{outside.min():g}" if outside.min() == outside.max() else f"{outside.min():g}–{outside.max():g}"
        warnings.warn(
            f"stock {stock.key}: {what} is left out at {span} nm, outside the {lo:g}–{hi:g} nm of {table}",
            PhantomlabWarning,
            stacklevel=4,
        )
    mua = np.zeros_like(grid)
    mua[inside] = function(wavelength_nm=grid[inside])
    return mua


def _oil(stock: Stock, grid) -> np.ndarray:
    """Absorption of the undiluted oil of an emulsion (van Veen et al. 2004 lipid spectrum)."""
    return _within_table(stock, grid, LIPID_VANVEEN2004_BAND_NM, lipid_absorption_vanVeen2004,
                         "the oil's own absorption", "the lipid spectrum (van Veen et al. 2004)")


def _solvent(stock: Stock, grid, temperature_c) -> np.ndarray:
    """Absorption of an absorber stock's solvent (what its spectrum was blanked against)."""
    spec = stock.spec
    if spec.solvent == "water":
        return water_absorption_at_temperature(grid, source=spec.water_source, temperature_c=temperature_c)
    if spec.solvent == "ethanol":
        return _within_table(stock, grid, ETHANOL_KEDENBURG2012_BAND_NM, ethanol_absorption_Kedenburg2012,
                             "the ethanol solvent's absorption", "the ethanol table (Kedenburg et al. 2012)")
    if spec.solvent == "spectrum":
        cols = spec.solvent_spectrum.columns
        return _interpolate_spectrum(stock.key, "solvent_spectrum_csv", cols["wavelength_nm"], cols["mua_per_mm"], grid)
    return np.zeros_like(grid)


def _require_matrix(matrix, stock: Stock) -> Stock:
    if matrix is None:
        raise InputError(f"stock {stock.key}: a {stock.kind} stock needs matrix= (the matrix stock it goes into)")
    if getattr(matrix, "kind", None) != "matrix":
        raise InputError(f"matrix= must be a matrix stock, got {getattr(matrix, 'key', matrix)!r}")
    return matrix


def _spheres(stock: Stock, grid, matrix: Stock, temperature_c, *, solids: float, carrier_water: float, water_source,
             water_temperature_c=None):
    spec = stock.spec
    n_matrix = refractive_index(matrix.spec.material, wavelength_nm=grid, temperature_c=temperature_c)
    n_particle = refractive_index(spec.material, wavelength_nm=grid, temperature_c=temperature_c)
    contrast = np.abs(np.real(n_particle) / n_matrix - 1.0)
    if np.min(contrast) < LOW_CONTRAST:
        warnings.warn(
            f"stock {stock.key}: relative index {spec.material}/{matrix.spec.material} within "
            f"{np.min(contrast):.3f} of 1; μs then depends strongly on the matrix index "
            f"({matrix.spec.material}: {np.mean(n_matrix):.4f}), measure it if you can",
            PhantomlabWarning,
            stacklevel=3,
        )
    ensemble = sphere_ensemble_optics(
        wavelength_nm=grid,
        particle_index=n_particle,
        matrix_index=n_matrix,
        diameters_um=spec.sizes.diameters_um,
        number_weights=spec.sizes.number_weights,
        volume_fraction=solids,
    )
    carrier = (1.0 - solids) * _water(grid, carrier_water, water_source, water_temperature_c)
    return ensemble.mua_per_mm, ensemble.mus_per_mm, ensemble.g, carrier


def _blood(stock: Stock, grid, so2, temperature_c):
    """Haemoglobin absorption at sO₂, red-cell scattering, and the blood's own water."""
    from phantomlab.materials.blood import blood_mua_per_mm, red_cell_scattering_Meinke2007

    spec = stock.spec
    if so2 is None:
        raise InputError(
            f"stock {stock.key}: a blood stock's absorption depends on the sO2 of the batch at that moment; "
            "give so2 (a fraction 0-1)"
        )
    mua = blood_mua_per_mm(wavelength_nm=grid, haemoglobin_g_per_l=spec.haemoglobin_g_per_l, so2=so2,
                           source=spec.extinction_source)
    if spec.scattering == "meinke2007":
        mus, g = red_cell_scattering_Meinke2007(wavelength_nm=grid, haematocrit=spec.haematocrit)
    elif spec.scattering == "measured":
        cols = spec.scattering_table.columns
        mus = _interpolate_spectrum(stock.key, "scattering_csv", cols["wavelength_nm"], cols["mus_per_mm"], grid)
        g = np.interp(grid, cols["wavelength_nm"], cols["g"])
    else:
        mus, g = np.zeros_like(grid), np.zeros_like(grid)
    carrier = _water(grid, spec.water_volume_fraction, spec.water_source, temperature_c)
    return mua, mus, g, carrier


def intrinsic_optics(stock: Stock, *, wavelength_nm, matrix: Stock | None, potency=None, temperature_c=20.0,
                     so2=None, water_temperature_c=None) -> IntrinsicOptics:
    """Intrinsic μa, μs and g of a stock on any wavelength grid.

    Per unit volume fraction of the undiluted stock in the final mix.  The potency multiplies
    the coefficients of the stock's scattering or absorbing ingredient (its μs and that
    ingredient's μa); the carrier water of a suspension or emulsion and the solvent of an
    absorber stock keep their own absorption (``mua_carrier_per_mm``), and g is not scaled.

    Parameters
    ----------
    stock : Stock
        Any kind (matrix, spheres, powder, emulsion, absorber).
    wavelength_nm : float or array [nm]
        Vacuum wavelengths.
    matrix : Stock or None
        The matrix the stock goes into (its index sets the Mie relative index and size
        parameter).  May be None for matrices, emulsions and absorbers.
    potency : float, optional
        Factor on the stock's strength; None uses ``stock.potency``.
    temperature_c : float [°C]
        Temperature for the water-based indices.
    so2 : float, optional [fraction]
        Oxygen saturation of the batch at the moment considered: required for a blood stock
        (its absorption depends on it), ignored by the other kinds.
    water_temperature_c : float, optional [°C]
        Temperature of the batch for the absorption of its water (matrix, carriers, water
        solvents): the IOCCG 2018 temperature coefficients over 300–1230 nm
        (:func:`~phantomlab.materials.water.water_absorption_at_temperature`); None: the
        tables as published (22–25 °C).  The recipe solver gives the recipe's
        ``measure_temperature_c``.

    Returns
    -------
    IntrinsicOptics

    Notes
    -----
    By kind:

    * **matrix** — its own background absorption (water fraction × water μa of the stock's
      ``water_source``, default Pope & Fry 1997 / Segelstein 1981, + a constant, or its
      measured spectrum); μs = 0.  For the matrix itself, "per
      volume fraction" is simply its μa.
    * **spheres** — Mie for the size distribution (:func:`~phantomlab.optics.mie.sphere_ensemble_optics`),
      relative index particle/matrix at each wavelength, at the stock's particle volume
      fraction f.  Its μa is the carrier's absorption (water, for an aqueous suspension)
      times (1 − f), not scaled by the potency, plus the particles' own absorption (zero for
      the real indices of the registry).
    * **powder** — as spheres with f = 1 and no carrier.  A first guess: grains aggregate, so
      a :class:`PhantomlabWarning` says the result needs calibration.
    * **emulsion** — the published empirical model (Michels et al. 2008) for μs and g; μa is
      the water of the continuous phase, (1 − φ) × water (not scaled by the potency), plus
      the oil's own absorption φ × lipid (van Veen et al. 2004, scaled with the potency like
      the scattering), φ the oil volume fraction.
    * **absorber** — the stock's intrinsic spectrum, linearly interpolated (refused outside
      the spectrum's range).  With an albedo a: an attenuation spectrum μt (cuvette, or a
      ``mut_per_mm`` column) splits into μa = (1 − a) μt and μs = a μt; an absorption
      spectrum μa gets μs = μa a/(1 − a).  The potency scales these; the stock's
      ``solvent`` (what its spectrum was blanked against: water, ethanol or a given
      spectrum; a tabulated solvent is left out, with a warning, outside its table) adds its
      own absorption, unscaled, because in the batch the stock's volume
      displaces matrix and brings its solvent with it.
    * **blood** — haemoglobin at the given sO₂, ln(10)/10 · c/64 500 · (sO₂ ε_HbO2 +
      (1 − sO₂) ε_Hb) from the stock's extinction table (per mole of tetramer; Beer–Lambert,
      :func:`phantomlab.materials.blood.blood_mua_per_mm`); red-cell scattering and g from
      Meinke et al. 2007 (linear haematocrit terms,
      :func:`~phantomlab.materials.blood.red_cell_scattering_Meinke2007`), a measured
      ``scattering_csv``, or none; the potency scales both (it is the haemoglobin actually
      there over the stated); the blood's water (``water_volume_fraction``) is its unscaled
      carrier.

    References
    ----------
    1. Bohren & Huffman (1983), ch. 4 (Mie theory).
    2. Michels, Foschum & Kienle (2008), Opt. Express 16:5907 (emulsion).
    3. Pope & Fry (1997), Appl. Opt. 36:8710; Segelstein (1981) (water absorption).
    4. van Veen et al. (2004), OSA Biomedical Topical Meeting (lipid absorption).
    5. Kedenburg et al. (2012), Opt. Mater. Express 2:1588 (ethanol absorption).
    6. Meinke et al. (2007), Appl. Opt. 46:1742 (red-cell scattering); Prahl (1999) compilation
       of Gratzer & Kollias (haemoglobin extinction).
    """
    if not isinstance(stock, Stock):
        raise InputError(f"intrinsic_optics needs a Stock from load_shelf, got {stock!r}")
    grid = wavelength_grid(wavelength_nm)
    if potency is None:
        potency = stock.potency
    if isinstance(potency, bool) or not isinstance(potency, (int, float)) or not np.isfinite(potency) or potency <= 0:
        raise InputError(f"stock {stock.key}: potency must be a number > 0, got {potency!r}")
    sd = 0.0
    g = np.zeros_like(grid)
    carrier = np.zeros_like(grid)
    if stock.kind == "matrix":
        mua = _matrix_background(stock, grid, water_temperature_c)
        mus = np.zeros_like(grid)
    elif stock.kind == "spheres":
        matrix = _require_matrix(matrix, stock)
        mua, mus, g, carrier = _spheres(
            stock, grid, matrix, temperature_c,
            solids=stock.solids_volume_fraction, carrier_water=stock.spec.carrier_water_volume_fraction,
            water_source=stock.spec.water_source, water_temperature_c=water_temperature_c,
        )
    elif stock.kind == "powder":
        matrix = _require_matrix(matrix, stock)
        mua, mus, g, _ = _spheres(stock, grid, matrix, temperature_c, solids=1.0, carrier_water=0.0,
                                  water_source=None)
        warnings.warn(
            f"stock {stock.key}: powder optics from Mie for separate {stock.spec.material} spheres are a "
            "first guess (grains aggregate); calibrate the potency on a pilot batch",
            PhantomlabWarning,
            stacklevel=2,
        )
    elif stock.kind == "emulsion":
        mus, g = EMULSION_SCATTERING[stock.spec.model](wavelength_nm=grid)
        oil = stock.solids_volume_fraction
        mua = oil * _oil(stock, grid)
        carrier = _water(grid, 1.0 - oil, stock.spec.water_source, water_temperature_c)
    elif stock.kind == "absorber":
        spec = stock.spec
        field_name = {"spectrum": "spectrum_csv", "extinction": "extinction_csv", "cuvette": "cuvette_csv"}[spec.method]
        value = _interpolate_spectrum(stock.key, field_name, spec.wavelength_nm, spec.coefficient_per_mm, grid)
        value_sd = np.interp(grid, spec.wavelength_nm, spec.coefficient_sd_per_mm)
        a = spec.albedo
        if spec.quantity == "attenuation":
            mua, mus, sd = (1.0 - a) * value, a * value, (1.0 - a) * value_sd
        else:
            mua, mus, sd = value, value * a / (1.0 - a), value_sd
        g = np.full_like(grid, spec.g) if a > 0 else np.zeros_like(grid)
        carrier = _solvent(stock, grid, water_temperature_c)
    elif stock.kind == "blood":
        mua, mus, g, carrier = _blood(stock, grid, so2, water_temperature_c)
    else:  # pragma: no cover - the loader admits only KINDS
        raise InputError(f"stock {stock.key}: unknown kind {stock.kind!r}")
    mus = np.asarray(mus, dtype=float)
    g = np.where(mus > 0, g, 0.0)
    return IntrinsicOptics(
        stock=stock,
        wavelength_nm=grid,
        mua_per_mm=potency * np.asarray(mua, dtype=float) + carrier,
        mus_per_mm=potency * mus,
        g=g,
        mua_sd_per_mm=potency * np.asarray(sd, dtype=float),
        mua_carrier_per_mm=carrier,
    )


def stock_angular_scattering(stock: Stock, *, wavelength_nm, matrix: Stock | None, temperature_c=20.0
                             ) -> AngularScattering | None:
    """The angular Mie data of a stock's particles for the angular dependent-scattering model.

    Parameters
    ----------
    stock : Stock
    wavelength_nm : float or array [nm]
    matrix : Stock or None
        The matrix the particles sit in (sets the relative index and the wavenumber).
    temperature_c : float [°C]
        Temperature for the water-based indices.

    Returns
    -------
    AngularScattering or None
        For spheres and powder stocks (a Mie size distribution); None for the other kinds,
        whose scattering is not built from spheres of known size (emulsion models, absorbers,
        blood, matrices).
    """
    if not isinstance(stock, Stock):
        raise InputError(f"stock_angular_scattering needs a Stock from load_shelf, got {stock!r}")
    if stock.kind not in ("spheres", "powder"):
        return None
    grid = wavelength_grid(wavelength_nm)
    matrix = _require_matrix(matrix, stock)
    n_matrix = refractive_index(matrix.spec.material, wavelength_nm=grid, temperature_c=temperature_c)
    n_particle = refractive_index(stock.spec.material, wavelength_nm=grid, temperature_c=temperature_c)
    return angular_scattering(wavelength_nm=grid, particle_index=n_particle, matrix_index=np.real(n_matrix),
                              diameters_um=stock.spec.sizes.diameters_um,
                              number_weights=stock.spec.sizes.number_weights)
