"""The ``optics`` kind: μa and μs′ measured by another instrument, taken as they are (layer 3).

Time- and frequency-domain instruments report absolute μa and μs′ themselves; this module
turns such a file into a :class:`FitResult` so those labs close the calibration loop too.
Without SD columns the SDs are the replicate spread (when files were combined) or unknown
(NaN, and a warning: the potency update then cannot weigh the batch).
"""

from __future__ import annotations

import numpy as np

from phantomlab.calibration.fit_srdr import _finish
from phantomlab.calibration.fit_result import FitResult
from phantomlab.calibration.measurements import Measurement
from phantomlab.errors import InputError

__all__ = ["fit_optics"]


def fit_optics(measurement: Measurement) -> FitResult:
    """Wrap measured μa, μs′ (and SDs) as a FitResult with ``model='direct'``.

    Parameters
    ----------
    measurement : Measurement
        ``kind='optics'``.

    Returns
    -------
    FitResult
        Covariance diagonal (the file gives no correlation); ``chi2_red`` NaN.
    """
    if measurement.kind != "optics":
        raise InputError(f"fit_optics needs an optics measurement, got {measurement.kind}")
    mua = measurement.values[:, 0].copy()
    musp = measurement.values[:, 1].copy()
    W = mua.size
    messages = []
    if measurement.sd is None:
        sd = np.full((W, 2), np.nan)
        messages.append("the optics file gives no SD columns: the fitted optics carry no uncertainty, "
                        "so the potency update cannot weigh them")
    else:
        sd = measurement.sd
    covariance = np.zeros((W, 2, 2))
    covariance[:, 0, 0] = sd[:, 0] ** 2
    covariance[:, 1, 1] = sd[:, 1] ** 2
    result = FitResult(
        kind="optics", model="direct", wavelength_nm=measurement.wavelength_nm, mua_per_mm=mua,
        musp_per_mm=musp, mua_sd_per_mm=sd[:, 0].copy(), musp_sd_per_mm=sd[:, 1].copy(),
        covariance=covariance, chi2_red=float("nan"), chi2_red_per_wavelength=np.full(W, np.nan),
        residuals=np.zeros((W, 0)),
    )
    return _finish(result, measurement, messages)
