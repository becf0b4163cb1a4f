"""What every inverse fit returns: :class:`FitResult` (layer 3).

The fitted μa and μs′ per wavelength with their SDs and covariance, the fit's χ², residuals,
warnings and the model's own error (``model_covariance``, added to the SDs by
:func:`phantomlab.calibration.fit_quality.assess_fit`); :meth:`FitResult.to_json` gives the
``fit`` object of docs/contract.md.  The solvers are in :mod:`phantomlab.calibration.fitting`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

__all__ = ["FitResult", "parameter_line"]


@dataclass(frozen=True)
class FitResult:
    """Fitted optical properties of one measurement, with their uncertainty.

    Attributes
    ----------
    kind : str
        Measurement kind (srdr, sfdi, slab, sphere, optics).
    model : str
        Forward model used (``diffusion-farrell1992``, ``mc-lookup``, ``adding-doubling``, ...).
    wavelength_nm : ndarray (W,) [nm]
    mua_per_mm, musp_per_mm : ndarray (W,) [1/mm]
    mua_sd_per_mm, musp_sd_per_mm : ndarray (W,) [1/mm]
        Standard uncertainties (inf where the data do not determine the value).
    covariance : ndarray (W, 2, 2) [1/mm^2]
        Covariance of (mua, musp) at each wavelength.
    chi2_red : float
        Reduced χ² over the whole measurement (NaN when there are no degrees of freedom).
    chi2_red_per_wavelength : ndarray (W,)
    dof : float
        Degrees of freedom of ``chi2_red`` over the whole measurement (data points minus
        fitted parameters; NaN when the fit has no test of fit).
    residuals : ndarray
        Normalised residuals (model − data)/SD, shape of the data.
    warnings : tuple of str
        Identifiability and model-range warnings (also raised as PhantomlabWarning).
    scale_factor, scale_factor_sd : ndarray (W,) or None
        Fitted scale of relative data (data = scale · model).
    parameters : dict
        Extra fitted parameters (spectral constraints), each ``{"value":..., "sd":...}``.
    source, name : str or None
        The file's ``# source:`` line and name.
    replicates : int
    extras : dict
        Further per-wavelength outputs of a kind, written as top-level JSON keys after the
        standard ones (slab and sphere: ``g``, ``g_sd``, ``total_reflectance``, ...).
    converged : bool
        The minimiser met its stopping rule at every wavelength (False: it ran out of
        iterations somewhere).
    model_covariance : ndarray (W, 2, 2) or None [1/mm^2]
        Covariance of (mua, musp) from the forward model's own known error (the diffusion
        models' measured error against Monte Carlo), kept apart so that
        :func:`phantomlab.calibration.fit_quality.assess_fit` adds it after scaling the
        statistical part by the misfit.
    sd_includes : tuple of str
        What the SDs account for (:data:`phantomlab.calibration.fit_quality.SD_PARTS`).
    fit_quality : {'good', 'poor', 'failed'} or None
        The verdict of :func:`~phantomlab.calibration.fit_quality.assess_fit` (None before).
    fit_quality_reason : str or None
        One line saying why.
    """

    kind: str
    model: str
    wavelength_nm: np.ndarray
    mua_per_mm: np.ndarray
    musp_per_mm: np.ndarray
    mua_sd_per_mm: np.ndarray
    musp_sd_per_mm: np.ndarray
    covariance: np.ndarray
    chi2_red: float
    chi2_red_per_wavelength: np.ndarray
    residuals: np.ndarray
    warnings: tuple[str, ...] = ()
    scale_factor: np.ndarray | None = None
    scale_factor_sd: np.ndarray | None = None
    parameters: Mapping[str, Any] = field(default_factory=dict)
    source: str | None = None
    name: str | None = None
    replicates: int = 1
    dof: float = float("nan")
    extras: Mapping[str, Any] = field(default_factory=dict)
    converged: bool = True
    model_covariance: np.ndarray | None = None
    sd_includes: tuple[str, ...] = ()
    fit_quality: str | None = None
    fit_quality_reason: str | None = None

    def to_json(self) -> dict[str, Any]:
        """The ``fit`` object of docs/contract.md (exact keys first, extras after), JSON-ready."""
        from phantomlab.jsonable import to_jsonable

        payload = {
            "wavelength_nm": self.wavelength_nm,
            "mua_per_mm": self.mua_per_mm,
            "musp_per_mm": self.musp_per_mm,
            "mua_sd_per_mm": self.mua_sd_per_mm,
            "musp_sd_per_mm": self.musp_sd_per_mm,
            "model": self.model,
            "chi2_red": self.chi2_red,
            "warnings": list(self.warnings),
            "fit_quality": self.fit_quality,
            "fit_quality_reason": self.fit_quality_reason,
            "sd_includes": list(self.sd_includes),
            "kind": self.kind,
            "covariance_mua_musp": self.covariance,
            "chi2_red_per_wavelength": self.chi2_red_per_wavelength,
            "dof": self.dof,
            "residuals": self.residuals,
            "parameters": dict(self.parameters),
            "source": self.source,
            "replicates": self.replicates,
        }
        if self.scale_factor is not None:
            payload["scale_factor"] = self.scale_factor
            payload["scale_factor_sd"] = self.scale_factor_sd
        for key, value in self.extras.items():
            payload.setdefault(key, value)
        return to_jsonable(payload)

    def with_warnings(self, messages) -> "FitResult":
        from dataclasses import replace

        merged = list(self.warnings)
        for message in messages:
            if message not in merged:
                merged.append(message)
        return replace(self, warnings=tuple(merged))

    def parameter_lines(self) -> list[str]:
        """One readable line per fitted extra parameter (``parameters`` but g, shown with the table).

        A td fit's window fractions go on one line together.
        """
        parameters = dict(self.parameters)
        lines = []
        rise, tail = parameters.pop("window_rise_fraction", None), parameters.pop("window_tail_fraction", None)
        if rise is not None and tail is not None:
            lines.append(f"fit window: from {100 * rise:g} % of the peak on the rise to {100 * tail:g} % of it on the tail")
        elif rise is not None or tail is not None:
            parameters.update({k: v for k, v in (("window_rise_fraction", rise), ("window_tail_fraction", tail))
                               if v is not None})
        return lines + [parameter_line(name, value) for name, value in parameters.items() if name != "g"]


def parameter_line(name: str, value) -> str:
    """One readable line for an extra parameter of a fit (the JSON keeps the raw object).

    ``musp_power_law`` (a, b with SDs and λ₀), ``amount_KEY`` (a stock's amount: volume
    fraction × potency), any ``{value, sd}``, and plain numbers.
    """

    def plus_minus(v, sd, fmt=".4g"):
        return f"{v:{fmt}}" + (f" ± {sd:.2g}" if sd is not None and np.isfinite(sd) else "")

    if name == "musp_power_law" and isinstance(value, Mapping):
        return (f"musp power law: musp = a (lambda / {value['reference_nm']:g} nm)^-b with "
                f"a = {plus_minus(value['a_per_mm'], value['a_sd_per_mm'])} /mm, b = {plus_minus(value['b'], value['b_sd'])}")
    if name.startswith("amount_") and isinstance(value, Mapping):
        return f"amount of {name[len('amount_'):]} (volume fraction x potency): {plus_minus(value['value'], value['sd'])}"
    if isinstance(value, Mapping) and "value" in value:
        return f"{name}: {plus_minus(value['value'], value.get('sd'))}"
    if isinstance(value, float):
        return f"{name}: {value:.4g}"
    return f"{name}: {value}"
