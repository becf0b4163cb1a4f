"""The absorber stock kind (layer 1): an intrinsic spectrum and the solvent it was blanked against.

Exactly one source: a measured ``spectrum_csv`` (μa or μt), an ``extinction_csv`` with the
stock's concentration, or a ``cuvette_csv`` dilution series fitted by
:func:`~phantomlab.materials.spectra.fit_dilution_series`.  The solvent (a key of
:data:`~phantomlab.materials.stock.fields.SOLVENTS` or a ``solvent_spectrum_csv``) brings
its own absorption into the batch, unscaled by the potency.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from phantomlab.materials.spectra import (
    CsvTable,
    DilutionFit,
    fit_dilution_series,
    mua_from_molar_extinction,
    mua_from_specific_extinction,
)
from phantomlab.materials.stock.fields import SOLVENTS, _fail
from phantomlab.materials.stock.readers import (
    _check_spectrum,
    _get_csv,
    _get_number,
    _get_string,
    _get_water_source,
)
from phantomlab.materials.water_sources import DEFAULT_WATER_SOURCE

__all__ = ["AbsorberSpec"]


@dataclass(frozen=True)
class AbsorberSpec:
    """An absorber's intrinsic spectrum (undiluted stock) and how it was obtained.

    Attributes
    ----------
    method : str
        ``"spectrum"``, ``"extinction"`` or ``"cuvette"``.
    wavelength_nm : ndarray [nm]
    coefficient_per_mm : ndarray [1/mm]
        Intrinsic μa (``quantity == "absorption"``) or collimated attenuation μt
        (``quantity == "attenuation"``: cuvette readings, ``mut_per_mm`` spectra).
    coefficient_sd_per_mm : ndarray [1/mm]
        Its SD (zero when the source gives none).
    quantity : str
        ``"absorption"`` or ``"attenuation"``.
    albedo : float
        Single-scattering albedo a = μs/(μa + μs) of the stock's particles (0 for dyes).
    g : float
        Scattering anisotropy of the stock's particles.
    dilution_fit : DilutionFit or None
        The cuvette fit, with its curvature and non-linearity flags.
    source : str or None
        The provenance line of the CSV file.
    solvent : str
        Key of :data:`SOLVENTS`, or ``"spectrum"`` for a ``solvent_spectrum_csv``.
    solvent_spectrum : CsvTable or None
        The solvent's own absorption (wavelength_nm, mua_per_mm) when given as a file.
    water_source : str
        Water absorption source when the solvent is water.
    """

    method: str
    wavelength_nm: np.ndarray
    coefficient_per_mm: np.ndarray
    coefficient_sd_per_mm: np.ndarray
    quantity: str
    albedo: float = 0.0
    g: float = 0.0
    dilution_fit: DilutionFit | None = None
    source: str | None = None
    solvent: str = "none"
    solvent_spectrum: CsvTable | None = None
    water_source: str = DEFAULT_WATER_SOURCE


def _parse_absorber(table, key, base, resolved):
    """An absorber table → (AbsorberSpec, density [g/mL], solids volume fraction 0)."""
    sources = [f for f in ("spectrum_csv", "extinction_csv", "cuvette_csv") if f in table]
    if not sources:
        raise _fail(key, "spectrum_csv", "missing; an absorber needs one of spectrum_csv, extinction_csv, cuvette_csv")
    if len(sources) > 1:
        raise _fail(key, sources[1], f"give one of spectrum_csv, extinction_csv, cuvette_csv (found {', '.join(sources)})")
    albedo = _get_number(table, key, "albedo", lambda v: 0 <= v < 1, default=0.0)
    g = _get_number(table, key, "g", lambda v: -1 < v < 1, default=0.0)
    density = _get_number(table, key, "density_g_per_ml", lambda v: v > 0, default=1.0)
    source = sources[0]
    extinction_only = ("concentration_mol_per_l", "concentration_mg_per_ml", "molar_mass_g_per_mol")
    if source != "extinction_csv":
        for name in extinction_only:
            if name in table:
                raise _fail(key, name, "only used with extinction_csv; remove it")
    if source != "cuvette_csv" and "cuvette_path_mm" in table:
        raise _fail(key, "cuvette_path_mm", "only used with cuvette_csv; remove it")
    fit = None
    if source == "spectrum_csv":
        csv_table = _get_csv(
            table, key, source, base, required=("wavelength_nm",), optional=("mua_per_mm", "mut_per_mm", "sd_per_mm")
        )
        values = [c for c in ("mua_per_mm", "mut_per_mm") if c in csv_table.columns]
        if len(values) != 1:
            raise _fail(key, source, f"{csv_table.path!r} needs exactly one of the columns mua_per_mm, mut_per_mm")
        _check_spectrum(csv_table, key, source, values[0])
        wavelength = csv_table.columns["wavelength_nm"]
        coefficient = csv_table.columns[values[0]]
        sd = csv_table.columns.get("sd_per_mm", np.zeros_like(coefficient))
        quantity = "absorption" if values[0] == "mua_per_mm" else "attenuation"
        method = "spectrum"
    elif source == "extinction_csv":
        csv_table = _get_csv(
            table,
            key,
            source,
            base,
            required=("wavelength_nm",),
            optional=("epsilon_per_molar_per_cm", "epsilon_per_mg_per_ml_per_cm"),
        )
        cols = [c for c in ("epsilon_per_molar_per_cm", "epsilon_per_mg_per_ml_per_cm") if c in csv_table.columns]
        if len(cols) != 1:
            raise _fail(key, source, f"{csv_table.path!r} needs exactly one of the columns epsilon_per_molar_per_cm, epsilon_per_mg_per_ml_per_cm")
        _check_spectrum(csv_table, key, source, cols[0])
        wavelength = csv_table.columns["wavelength_nm"]
        epsilon = csv_table.columns[cols[0]]
        molar_c = _get_number(table, key, "concentration_mol_per_l", lambda v: v > 0)
        mass_c = _get_number(table, key, "concentration_mg_per_ml", lambda v: v > 0)
        molar_mass = _get_number(table, key, "molar_mass_g_per_mol", lambda v: v > 0)
        if (molar_c is None) == (mass_c is None):
            raise _fail(key, "concentration_mol_per_l", "give the stock's concentration once: concentration_mol_per_l or concentration_mg_per_ml")
        if cols[0] == "epsilon_per_molar_per_cm":
            if molar_c is None:
                if molar_mass is None:
                    raise _fail(key, "molar_mass_g_per_mol", "missing; a molar extinction table with concentration_mg_per_ml needs the molar mass in g/mol")
                molar_c = mass_c / molar_mass  # mg/mL = g/L; / (g/mol) = mol/L
            coefficient = mua_from_molar_extinction(epsilon_per_molar_per_cm=epsilon, concentration_mol_per_l=molar_c)
        else:
            if mass_c is None:
                if molar_mass is None:
                    raise _fail(key, "molar_mass_g_per_mol", "missing; a specific (per mg/mL) extinction table with concentration_mol_per_l needs the molar mass in g/mol")
                mass_c = molar_c * molar_mass
            coefficient = mua_from_specific_extinction(epsilon_per_mg_per_ml_per_cm=epsilon, concentration_mg_per_ml=mass_c)
        sd = np.zeros_like(coefficient)
        quantity = "absorption"
        method = "extinction"
    else:
        path_mm = _get_number(table, key, "cuvette_path_mm", lambda v: v > 0, required=True)
        csv_table = _get_csv(
            table, key, source, base, required=("wavelength_nm", "stock_volume_fraction", "absorbance")
        )
        cols = csv_table.columns
        fit = fit_dilution_series(
            wavelength_nm=cols["wavelength_nm"],
            stock_volume_fraction=cols["stock_volume_fraction"],
            absorbance=cols["absorbance"],
            path_length_mm=path_mm,
            context=f"stock {key}, field {source}",
        )
        wavelength = fit.wavelength_nm
        coefficient = fit.coefficient_per_mm
        sd = fit.coefficient_sd_per_mm
        quantity = "attenuation"
        method = "cuvette"
    resolved[source] = csv_table.to_definition()
    if wavelength.size < 2:
        raise _fail(key, source, "needs at least two wavelengths")
    solvent, solvent_spectrum = _solvent(table, key, base, resolved)
    spec = AbsorberSpec(
        method=method,
        wavelength_nm=np.array(wavelength, dtype=float),
        coefficient_per_mm=np.array(coefficient, dtype=float),
        coefficient_sd_per_mm=np.array(sd, dtype=float),
        quantity=quantity,
        albedo=albedo,
        g=g,
        dilution_fit=fit,
        source=csv_table.source,
        solvent=solvent,
        solvent_spectrum=solvent_spectrum,
        water_source=_get_water_source(table, key),
    )
    return spec, density, 0.0


def _solvent(table, key, base, resolved):
    """The absorber's solvent: a key of SOLVENTS, or "spectrum" with its CSV table."""
    if "solvent_spectrum_csv" in table:
        if "solvent" in table:
            raise _fail(key, "solvent", "give the solvent once: solvent or solvent_spectrum_csv")
        spectrum = _get_csv(table, key, "solvent_spectrum_csv", base, required=("wavelength_nm", "mua_per_mm"))
        _check_spectrum(spectrum, key, "solvent_spectrum_csv", "mua_per_mm")
        resolved["solvent_spectrum_csv"] = spectrum.to_definition()
        return "spectrum", spectrum
    solvent = _get_string(table, key, "solvent", default="none", choices=tuple(SOLVENTS))
    if "water_source" in table and solvent != "water":
        raise _fail(key, "water_source", "only used with solvent = \"water\"; remove it")
    return solvent, None
