"""The μa spectrum of a fit's JSON output, as input to the unmixing (layer 3).

``phantomlab unmix --from-fit FIT.json`` reads the ``fit`` object of docs/contract.md
(``wavelength_nm``, ``mua_per_mm``, ``mua_sd_per_mm``) instead of a CSV spectrum.
"""

from __future__ import annotations

import json

import numpy as np

from phantomlab.errors import InputError

__all__ = ["MAX_FIT_JSON_BYTES", "spectrum_from_fit_json"]


#: Largest fit JSON file read by ``--from-fit`` [bytes].
MAX_FIT_JSON_BYTES = 20_000_000


def spectrum_from_fit_json(text: str, *, name: str = "fit JSON"):
    """μa and its SD from a fit's JSON output (the ``fit`` object of docs/contract.md).

    Returns
    -------
    (wavelength_nm, mua_per_mm, mua_sd_per_mm or None)
        The SD is None when any wavelength has none (``null``): the unmixing then uses
        relative residuals for all.
    """
    if len(text) > MAX_FIT_JSON_BYTES:
        raise InputError(f"{name}: larger than {MAX_FIT_JSON_BYTES // 1_000_000} MB")
    try:
        payload = json.loads(text)
    except ValueError:
        raise InputError(f"{name}: not JSON; give the output of phantomlab fit ... --json") from None
    if not isinstance(payload, dict) or "wavelength_nm" not in payload or "mua_per_mm" not in payload:
        raise InputError(f"{name}: no wavelength_nm and mua_per_mm keys; give the output of phantomlab fit ... --json")
    try:
        wavelength = np.asarray(payload["wavelength_nm"], dtype=float)
        mua = np.asarray(payload["mua_per_mm"], dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{name}: wavelength_nm and mua_per_mm must be lists of numbers") from None
    raw_sd = payload.get("mua_sd_per_mm")
    sd = None
    if isinstance(raw_sd, list) and raw_sd and all(isinstance(v, (int, float)) for v in raw_sd):
        sd = np.asarray(raw_sd, dtype=float)
    return wavelength, mua, sd
