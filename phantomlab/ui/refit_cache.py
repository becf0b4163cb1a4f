"""What "Fit and correct" reads and fits, once per input (layer 5): no physics, only caches.

A rerun of the page (any click) must not read and fit the same measurement again.  Each
value is kept (``st.cache_resource``, shared by the server's sessions) under a key holding
everything it depends on (:mod:`phantomlab.ui.page_cache`):

* a stored measurement file: the database and the state of its log, and the measurement id;
* the measurement read: the file's content (SHA-256), kind, sidecar and options;
* the fit (:func:`fit_key`): the same plus the model, the power-law choice, the g fallback
  and the state of the Monte Carlo baseline files it may use (the per-user cache folder and
  the page's baseline folder), so a baseline built or rebuilt meanwhile is fitted with;
* the batch's g: the state of the log, the batch and the wavelengths.
"""

from __future__ import annotations

import json

import numpy as np
import streamlit as st

from phantomlab.ui.baseline_build import baseline_files
from phantomlab.ui.page_cache import content_key, log_state, replay, with_warnings

__all__ = ["baseline_files", "fit_key", "fitted", "measurement_read", "stored_file", "batch_g"]

def stored_file(store, measurement_id: int) -> tuple[bytes, str | None]:
    """The stored measurement file and its sidecar text, read once per state of the log."""
    return _stored_file(log_state(store), int(measurement_id), store)


@st.cache_resource(show_spinner=False, max_entries=4)
def _stored_file(log: tuple, measurement_id: int, _store) -> tuple[bytes, str | None]:
    from phantomlab.store import get_measurement  # layer 4

    with _store.reading() as session:
        row = get_measurement(session, measurement_id)
        return bytes(row.raw_content), row.metadata_toml


def _plain_key(value) -> str:
    return json.dumps(value, sort_keys=True, default=str)


def measurement_read(text: str, kind: str, sidecar: dict, options: dict):
    """:func:`phantomlab.calibration.read_measurement`, once per content, kind, sidecar and options."""
    key = _plain_key([content_key(text), kind, sidecar, options])
    return replay(_measurement_read(key, text, sidecar, options, kind))


@st.cache_resource(show_spinner=False, max_entries=8)
def _measurement_read(key: str, _text: str, _sidecar: dict, _options: dict, kind: str):
    from phantomlab.calibration import read_measurement  # layer 3

    return with_warnings(read_measurement, _text, kind=kind, sidecar=_sidecar, **_options)


def fit_key(text: str, *, kind: str, sidecar: dict, model: str, options: dict, g_fallback, power_law: bool,
            baselines: tuple) -> str:
    """Everything a page fit depends on, as one string (the file by its SHA-256)."""
    return _plain_key([content_key(text), kind, sidecar, model, options, g_fallback, bool(power_law), baselines])


def fitted(key: str, fit, *args, **kwargs):
    """``fit(*args, **kwargs)`` once per :func:`fit_key` (its warnings raised again on every run)."""
    return replay(_fitted(key, fit, args, kwargs))


@st.cache_resource(show_spinner=False, max_entries=8)
def _fitted(key: str, _fit, _args: tuple, _kwargs: dict):
    return with_warnings(_fit, *_args, **_kwargs)


def batch_g(store, code: str, wavelength_nm, *, per_wavelength: bool = False):
    """:func:`phantomlab.measurement_workflow.batch_anisotropy`, once per state of the log, batch and wavelengths.

    ``per_wavelength``: g at each wavelength (a list) instead of the band's mean.
    """
    wavelengths = tuple(float(w) for w in wavelength_nm)
    return replay(_batch_g(log_state(store), code, wavelengths, bool(per_wavelength), store))


@st.cache_resource(show_spinner=False, max_entries=16)
def _batch_g(log: tuple, code: str, wavelengths: tuple, per_wavelength: bool, _store):
    from phantomlab.measurement_workflow import batch_anisotropy

    def found():
        value = batch_anisotropy(_store, code, wavelength_nm=np.asarray(wavelengths, float),
                                 per_wavelength=per_wavelength)
        if value is not None and per_wavelength:
            return [float(g) for g in value[0]], value[1]
        return value

    return with_warnings(found)
