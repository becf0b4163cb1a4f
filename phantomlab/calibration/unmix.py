"""Spectral unmixing: fitted μa(λ) → haemoglobin, sO₂, water, lipid and a recipe's stocks (layer 3).

The absorption of a blood phantom is a sum of known spectra with non-negative amounts
(Beer–Lambert with independent absorbers)::

    μa(λ) = c_HbO2 · k_HbO2(λ) + c_Hb · k_Hb(λ) [+ c_MetHb · k_MetHb(λ) + c_COHb · k_COHb(λ)]
            + f_water · μa_water(λ) + f_lipid · μa_lipid(λ) + Σ_s f_s · μa_s(λ)

with k = ln(10) · ε · 1e-6 / 10 [1/mm per µM of tetramer] from a published haemoglobin table
(:mod:`phantomlab.materials.haemoglobin`) and the volume fractions of water and lipid
multiplying the pure liquids' μa (water: :func:`phantomlab.materials.water.water_absorption_per_mm`,
its default source; lipid: van Veen et al. 2004, :mod:`phantomlab.materials.solvents`), and
f_s the volume fraction of an absorber stock s of a recipe with its intrinsic μa
(:mod:`phantomlab.calibration.unmix_stocks`, which also says how a stock's solvent water is
kept out of its column and how a blood stock's fraction follows from the total haemoglobin).
Methaemoglobin and carboxyhaemoglobin come from a table that prints them (Zijlstra et al.
2000); all haemoglobin columns come from one table.  The amounts are found by weighted
non-negative least squares (Lawson & Hanson 1974, ch. 23, ``scipy.optimize.nnls``) on
columns scaled to unit norm; then

    sO₂ = c_HbO2 / (c_HbO2 + c_Hb)   (functional saturation: MetHb and COHb left out),
    total haemoglobin = c_HbO2 + c_Hb [+ c_MetHb + c_COHb]   [µM tetramer].

Uncertainties: the covariance of the amounts is (AᵀWA)⁻¹ with W = diag(1/σ²) from the
stated SDs of μa; without SDs the residuals are relative (σ ∝ μa) and the covariance is
scaled by the residual variance (``chi2_red`` is then null).  The covariance is that of the
unconstrained linear problem (a component held at zero keeps its unconstrained SD).  SDs of
sO₂ and total haemoglobin follow by the delta method with the full covariance.

Whether the wavelengths can separate the chromophores at all is the condition number of
the weighted, column-normalised design matrix (ratio of its largest to smallest singular
value): the factor by which a relative error of the data can grow in the amounts.  Above
:data:`CONDITION_WARN` the result is flagged, naming the chromophore whose (weighted,
normalised) spectrum lies closest to a mix of the others: the one with the smallest
distance ‖(I − P₋ⱼ) aⱼ‖ from the span of the other columns (1 for a spectrum unlike any mix,
0 for an exact mix; the variance inflation factor is its inverse square).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.optimize import nnls

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.calibration.unmix_stocks import (
    absorber_column,
    absorber_keys,
    blood_stock_tetramer_um,
    check_stock_chromophore,
)
from phantomlab.materials.haemoglobin import (
    EXTINCTION_BASIS,
    haemoglobin_mua_per_mm_per_um,
    source_for,
)
from phantomlab.materials.solvents import lipid_absorption_vanVeen2004
from phantomlab.materials.water import checked_liquid_temperature, water_absorption_at_temperature

__all__ = [
    "UNMIX_CHROMOPHORES",
    "HAEMOGLOBIN_FORMS",
    "MAX_CHROMOPHORES",
    "CONDITION_WARN",
    "SO2_SD_WARN",
    "MAX_WAVELENGTHS",
    "UnmixResult",
    "parse_chromophore_list",
    "chromophore_columns",
    "unmix_spectrum",
]

#: Chromophores the unmixing knows by name, with the unit of their amount (a recipe's
#: absorber stocks come in addition, by stock key, as volume fractions of the stock).
UNMIX_CHROMOPHORES: dict[str, str] = {
    "hbo2": "uM",
    "hb": "uM",
    "methb": "uM",
    "cohb": "uM",
    "water": "volume fraction",
    "lipid": "volume fraction",
}

#: The haemoglobin forms among them (µM tetramer; their sum is the total haemoglobin).
HAEMOGLOBIN_FORMS = ("hbo2", "hb", "methb", "cohb")

#: Most chromophores one unmixing fits (named ones and stocks together).
MAX_CHROMOPHORES = 12

#: Condition number above which the wavelengths are said not to separate the chromophores.
#: With 1 % noise on μa, a condition number of 30 lets the amounts move by up to 30 %;
#: well-spread sets stay near 2–15 (650–1000 nm every 10 nm with water: 3.2–3.9; 500–600 nm
#: every 4 nm: 4–6), the isosbestic rows near 500, 544, 570, 584 and 796 nm alone give 85
#: (tests/calibration/test_unmix.py).
CONDITION_WARN = 30.0

#: An SD of sO₂ above this is flagged as too uncertain to test an oximeter with.
SO2_SD_WARN = 0.05

#: Most wavelengths one unmixing accepts (a 1 nm grid over 250–1000 nm is 751).
MAX_WAVELENGTHS = 2000


def parse_chromophore_list(text, *, stocks=None) -> tuple[str, ...]:
    """Read ``--chromophores hbo2,hb,water[,lipid,methb,cohb,STOCK...]``: both haemoglobins, each once.

    Parameters
    ----------
    text : str
        Comma-separated names.
    stocks : mapping of str to Stock, optional
        The recipe's stocks by key: their absorber stocks may then be named (other kinds are
        refused in one line).  Named chromophores win over a stock with the same key.
    """
    if isinstance(text, str) and len(text) > 2000:
        raise InputError("chromophores: longer than 2000 characters; give a comma-separated list of names")
    names = tuple(part.strip() for part in str(text).split(",") if part.strip())
    names = tuple(n.lower() if n.lower() in UNMIX_CHROMOPHORES else n for n in names)
    if len(names) > MAX_CHROMOPHORES:
        raise InputError(f"chromophores: {len(names)} names; at most {MAX_CHROMOPHORES}")
    stocks = stocks or {}
    unknown = [n for n in names if n not in UNMIX_CHROMOPHORES and n not in stocks]
    if unknown:
        more = (f", or an absorber stock of the recipe ({', '.join(absorber_keys(stocks)) or 'none'})" if stocks
                else " (a recipe's absorber stock: phantomlab unmix --recipe)")
        raise InputError(
            f"chromophores: unknown {', '.join(unknown)}; known: {', '.join(UNMIX_CHROMOPHORES)}{more}"
        )
    for name in names:
        if name not in UNMIX_CHROMOPHORES:
            check_stock_chromophore(name, stocks)
    if len(set(names)) != len(names):
        raise InputError(f"chromophores: each name once, got {','.join(names)}")
    if "hbo2" not in names or "hb" not in names:
        raise InputError("chromophores: give both hbo2 and hb (sO2 needs both), e.g. hbo2,hb,water")
    return names


def chromophore_columns(chromophores, *, wavelength_nm, source: str | None = None, stocks=None,
                        water_temperature_c: float | None = None) -> np.ndarray:
    """The design matrix: μa per unit amount of each chromophore, shape (wavelengths, chromophores).

    Units: [1/mm per µM tetramer] for the haemoglobin forms (one table: ``source``, or the
    first that holds them all); [1/mm per volume fraction] for ``water`` and ``lipid`` (the
    pure liquid's μa; water at ``water_temperature_c`` [°C] by the IOCCG 2018 coefficients,
    :func:`phantomlab.materials.water.water_absorption_at_temperature`, or as tabulated when
    None) and for an absorber stock named by its key in ``stocks`` (its intrinsic μa, water
    solvent left out: :func:`phantomlab.calibration.unmix_stocks.absorber_column`).
    """
    wavelength = np.asarray(wavelength_nm, dtype=float)
    forms = [n for n in chromophores if n in HAEMOGLOBIN_FORMS]
    table = source_for(forms, source) if forms else None
    stocks = stocks or {}
    columns = []
    for name in chromophores:
        if name in HAEMOGLOBIN_FORMS:
            columns.append(haemoglobin_mua_per_mm_per_um(name, wavelength_nm=wavelength, source=table))
        elif name == "water":
            columns.append(water_absorption_at_temperature(wavelength, temperature_c=water_temperature_c))
        elif name == "lipid":
            columns.append(lipid_absorption_vanVeen2004(wavelength_nm=wavelength))
        elif name in stocks:
            columns.append(absorber_column(stocks[name], wavelength_nm=wavelength))
        else:  # parse_chromophore_list refuses these first
            raise InputError(f"chromophores: unknown {name!r}; known: {', '.join(UNMIX_CHROMOPHORES)}")
    return np.column_stack(columns)


@dataclass(frozen=True)
class UnmixResult:
    """Amounts of each chromophore, sO₂ and total haemoglobin, with SDs.

    Attributes
    ----------
    chromophores : tuple of str
    amounts, amount_sds : dict of str to float
        µM tetramer for the haemoglobin forms, volume fraction for ``water``/``lipid`` and
        for a recipe's absorber stocks (of the undiluted stock).
    so2, so2_sd : float or None
        Functional saturation c_HbO2 / (c_HbO2 + c_Hb), fraction 0–1 (None when both are 0).
    thb_um, thb_sd_um : float
        Total haemoglobin, all forms fitted [µM tetramer].
    chi2_red : float or None
        Reduced χ² (None without SDs or degrees of freedom).
    dof : int
    condition_number : float
    covariance : ndarray
    wavelength_nm, mua_per_mm, model_mua_per_mm, residuals : ndarray
    source : str
        Haemoglobin table used.
    warnings : tuple of str
    stock_fractions, stock_fraction_sds : dict of str to float
        Volume fraction of each stock of the recipe unmixed (absorber stocks: their
        amounts; the blood stock: from the total haemoglobin), with SDs; empty without stocks.
    independence : dict of str to float
        Per chromophore, the distance of its weighted, normalised spectrum from the span of
        the others (0: an exact mix of them, 1: unlike any mix).
    water_temperature_c : float or None
        Temperature the water column was taken at [°C] (None: the tables as published).
    """

    chromophores: tuple
    amounts: dict
    amount_sds: dict
    so2: float | None
    so2_sd: float | None
    thb_um: float
    thb_sd_um: float
    chi2_red: float | None
    dof: int
    condition_number: float
    covariance: np.ndarray
    wavelength_nm: np.ndarray
    mua_per_mm: np.ndarray
    model_mua_per_mm: np.ndarray
    residuals: np.ndarray
    source: str
    warnings: tuple = field(default=())
    stock_fractions: dict = field(default_factory=dict)
    stock_fraction_sds: dict = field(default_factory=dict)
    independence: dict = field(default_factory=dict)
    water_temperature_c: float | None = None

    def to_json(self) -> dict[str, Any]:
        """The ``unmix`` object of docs/contract.md (stable keys first, extras after)."""
        from phantomlab.jsonable import to_jsonable

        payload: dict[str, Any] = {
            "so2": self.so2,
            "so2_sd": self.so2_sd,
            "thb_um": self.thb_um,
            "thb_sd_um": self.thb_sd_um,
            "water_fraction": self.amounts.get("water"),
        }
        if "lipid" in self.chromophores:
            payload["lipid_fraction"] = self.amounts["lipid"]
        payload.update(
            {
                "chi2_red": self.chi2_red,
                "condition_number": self.condition_number,
                "warnings": list(self.warnings),
            }
        )
        if self.stock_fractions:
            payload["stock_fractions"] = dict(self.stock_fractions)
            payload["stock_fraction_sds"] = dict(self.stock_fraction_sds)
        payload["water_fraction_sd"] = self.amount_sds.get("water")
        if "lipid" in self.chromophores:
            payload["lipid_fraction_sd"] = self.amount_sds["lipid"]
        for form in HAEMOGLOBIN_FORMS:
            if form in self.chromophores:
                payload[f"{form}_um"] = self.amounts[form]
                payload[f"{form}_sd_um"] = self.amount_sds[form]
        payload.update(
            {
                "chromophores": list(self.chromophores),
                "source": self.source,
                "water_temperature_c": self.water_temperature_c,
                "basis": EXTINCTION_BASIS,
                "dof": self.dof,
                "independence": dict(self.independence),
                "wavelength_nm": self.wavelength_nm,
                "mua_per_mm": self.mua_per_mm,
                "model_mua_per_mm": self.model_mua_per_mm,
                "residuals": self.residuals,
                "covariance": self.covariance,
            }
        )
        return to_jsonable(payload)


def _checked_spectrum(wavelength_nm, mua_per_mm, mua_sd_per_mm):
    try:
        wavelength = np.asarray(wavelength_nm, dtype=float).ravel()
        mua = np.asarray(mua_per_mm, dtype=float).ravel()
        sd = None if mua_sd_per_mm is None else np.asarray(mua_sd_per_mm, dtype=float).ravel()
    except (TypeError, ValueError):
        raise InputError("unmix: wavelength_nm, mua_per_mm and mua_sd_per_mm must be numbers") from None
    if wavelength.shape != mua.shape or (sd is not None and sd.shape != mua.shape):
        raise InputError("unmix: wavelength_nm, mua_per_mm (and mua_sd_per_mm) must have one value per wavelength")
    if wavelength.size > MAX_WAVELENGTHS:
        raise InputError(f"unmix: {wavelength.size} wavelengths; at most {MAX_WAVELENGTHS}")
    if not np.all(np.isfinite(wavelength)) or not np.all(np.isfinite(mua)):
        raise InputError("unmix: wavelengths and mua must be finite numbers")
    if len(np.unique(wavelength)) != wavelength.size:
        raise InputError("unmix: each wavelength once")
    if sd is not None and (not np.all(np.isfinite(sd)) or np.any(sd <= 0)):
        raise InputError("unmix: every mua SD must be a finite number > 0 (or give none)")
    order = np.argsort(wavelength)
    return wavelength[order], mua[order], None if sd is None else sd[order]


def _independence(scaled: np.ndarray) -> np.ndarray:
    """Per column, its distance from the span of the other columns (columns of unit norm)."""
    k = scaled.shape[1]
    out = np.ones(k)
    if k < 2:
        return out
    for j in range(k):
        others = np.delete(scaled, j, axis=1)
        coefficients, *_ = np.linalg.lstsq(others, scaled[:, j], rcond=None)
        out[j] = float(np.linalg.norm(scaled[:, j] - others @ coefficients))
    return out


def unmix_spectrum(
    *,
    wavelength_nm,
    mua_per_mm,
    mua_sd_per_mm=None,
    chromophores=("hbo2", "hb", "water"),
    source: str | None = None,
    stocks=None,
    blood_stock: str | None = None,
    water_temperature_c: float | None = None,
) -> UnmixResult:
    """Unmix a μa spectrum into haemoglobin forms, water, lipid and a recipe's absorber stocks.

    Parameters
    ----------
    wavelength_nm : array [nm]
    mua_per_mm : array [1/mm]
        Fitted or measured absorption coefficient.
    mua_sd_per_mm : array [1/mm] or None
        Its SD per wavelength; None: relative residuals, covariance scaled by them.
    chromophores : sequence of str
        Names from :data:`UNMIX_CHROMOPHORES` and keys of absorber stocks in ``stocks``;
        ``hbo2`` and ``hb`` are required.
    source : str or None
        Haemoglobin extinction table (:data:`phantomlab.materials.haemoglobin.HAEMOGLOBIN_SOURCES`);
        None: ``gratzer-kollias``, or the first table holding every form asked (``methb``,
        ``cohb``: ``zijlstra-2000``).
    stocks : mapping of str to Stock, optional
        The recipe's stocks by key (absorber stocks become columns when named).
    blood_stock : str, optional
        Key of a blood stock in ``stocks``: its volume fraction is reported from the total
        haemoglobin (f = T / (p · c)).
    water_temperature_c : float, optional [°C]
        Temperature of the measured phantom: the ``water`` column absorbs at it (0–60 °C;
        None: the water tables as published, 20–25 °C).  Near 740 and 970 nm water's
        absorption rises about 0.5 % per °C (IOCCG 2018).

    Returns
    -------
    UnmixResult

    Notes
    -----
    Weighted non-negative least squares (Lawson & Hanson 1974, *Solving Least Squares
    Problems*, ch. 23) on the column-normalised design; covariance (AᵀWA)⁻¹ of the linear
    model; delta method for sO₂ = c₁/(c₁ + c₂): ∂sO₂/∂c₁ = c₂/T², ∂sO₂/∂c₂ = −c₁/T²; the
    total haemoglobin's variance is the sum of the haemoglobin block of the covariance.
    """
    stocks = dict(stocks or {})
    names = parse_chromophore_list(",".join(chromophores), stocks=stocks)
    forms = [n for n in names if n in HAEMOGLOBIN_FORMS]
    source = source_for(forms, source)
    if blood_stock is not None and (blood_stock not in stocks or stocks[blood_stock].kind != "blood"):
        raise InputError(f"unmix: blood_stock {blood_stock!r} is not a blood stock of the recipe")
    wavelength, mua, sd = _checked_spectrum(wavelength_nm, mua_per_mm, mua_sd_per_mm)
    if water_temperature_c is not None:
        water_temperature_c = checked_liquid_temperature(water_temperature_c, what="unmix: water temperature")
    k = len(names)
    if wavelength.size < k:
        raise InputError(
            f"unmix: {wavelength.size} wavelengths for {k} chromophores; give at least as many wavelengths"
        )
    messages: list[str] = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PhantomlabWarning)
        design = chromophore_columns(names, wavelength_nm=wavelength, source=source, stocks=stocks,
                                     water_temperature_c=water_temperature_c)
    for item in caught:
        text = " ".join(str(item.message).split())
        if text not in messages:
            messages.append(text)
    relative = sd is None
    sigma = sd if sd is not None else np.maximum(np.abs(mua), 1e-3 * max(np.max(np.abs(mua)), 1e-12))
    weighted = design / sigma[:, None]
    target = mua / sigma
    norms = np.linalg.norm(weighted, axis=0)
    if np.any(norms == 0):
        zero = [n for n, v in zip(names, norms) if v == 0]
        raise InputError(f"unmix: {', '.join(zero)} absorbs nothing at these wavelengths; leave it out")
    scaled = weighted / norms
    singular = np.linalg.svd(scaled, compute_uv=False)
    condition = float(singular[0] / singular[-1]) if singular[-1] > 0 else math.inf
    independence = _independence(scaled)
    solution_scaled, _ = nnls(scaled, target, maxiter=50 * k)
    amounts_vector = solution_scaled / norms
    model = design @ amounts_vector
    residual = (mua - model) / sigma
    dof = int(wavelength.size - k)
    rss = float(residual @ residual)
    covariance_scaled = np.linalg.pinv(scaled.T @ scaled)
    covariance = covariance_scaled / np.outer(norms, norms)
    chi2_red = None
    if relative:
        if dof > 0:
            covariance = covariance * (rss / dof)
        else:
            covariance = np.full_like(covariance, np.nan)
            messages.append("unmix: as many wavelengths as chromophores and no SDs: the SDs are not known")
    elif dof > 0:
        chi2_red = rss / dof
    amount_sds_vector = np.sqrt(np.clip(np.diag(covariance), 0.0, None))
    amounts = {n: float(v) for n, v in zip(names, amounts_vector)}
    amount_sds = {n: float(v) for n, v in zip(names, amount_sds_vector)}
    i, j = names.index("hbo2"), names.index("hb")
    c1, c2 = amounts_vector[i], amounts_vector[j]
    form_index = [names.index(n) for n in forms]
    total = float(np.sum(amounts_vector[form_index]))
    thb_var = float(np.sum(covariance[np.ix_(form_index, form_index)]))
    thb_sd = float(math.sqrt(max(thb_var, 0.0))) if np.isfinite(thb_var) else math.nan
    if c1 + c2 > 0:
        functional = float(c1 + c2)
        so2 = float(c1 / functional)
        gradient = np.array([c2, -c1]) / functional**2
        sub = covariance[np.ix_([i, j], [i, j])]
        so2_var = float(gradient @ sub @ gradient)
        so2_sd = float(math.sqrt(max(so2_var, 0.0))) if np.isfinite(so2_var) else math.nan
    else:
        so2 = so2_sd = None
        messages.append("unmix: no oxy- or deoxyhaemoglobin found (0 µM): sO2 is undefined")
    stock_keys = [n for n in names if n not in UNMIX_CHROMOPHORES]
    stock_fractions = {n: amounts[n] for n in stock_keys}
    stock_fraction_sds = {n: amount_sds[n] for n in stock_keys}
    if blood_stock is not None:
        concentration = blood_stock_tetramer_um(stocks[blood_stock])
        stock_fractions[blood_stock] = total / concentration
        stock_fraction_sds[blood_stock] = thb_sd / concentration
    if condition > CONDITION_WARN:
        closest = names[int(np.argmin(independence))]
        if closest in ("hbo2", "hb"):
            advice = "add wavelengths where HbO2 and Hb differ (e.g. 660-760 nm and 850-900 nm) before trusting sO2"
        else:
            others = ", ".join(n for n in names if n != closest)
            advice = (f"the spectrum of {closest} is nearly a mix of {others} (it lies "
                      f"{100 * float(np.min(independence)):.2g} % of its length from the closest mix): "
                      f"leave it out or add wavelengths where it differs")
        messages.append(
            f"unmix: the wavelengths cannot separate {', '.join(names)} well (condition number "
            f"{condition:.3g} > {CONDITION_WARN:g}); {advice}"
        )
    if so2_sd is not None and np.isfinite(so2_sd) and so2_sd > SO2_SD_WARN:
        messages.append(f"unmix: sO2 SD {so2_sd:.3f} is above {SO2_SD_WARN:g}; too uncertain to test an oximeter against")
    return UnmixResult(
        chromophores=names,
        amounts=amounts,
        amount_sds=amount_sds,
        so2=so2,
        so2_sd=so2_sd,
        thb_um=total,
        thb_sd_um=thb_sd,
        chi2_red=chi2_red,
        dof=dof,
        condition_number=condition,
        covariance=covariance,
        wavelength_nm=wavelength,
        mua_per_mm=mua,
        model_mua_per_mm=model,
        residuals=residual,
        source=source,
        warnings=tuple(messages),
        stock_fractions=stock_fractions,
        stock_fraction_sds=stock_fraction_sds,
        independence={n: float(v) for n, v in zip(names, independence)},
        water_temperature_c=water_temperature_c,
    )

