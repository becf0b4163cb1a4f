"""Calibration layer of phantomlab (layer 3, docs/design.md): inverse fits and the potency loop.

* :func:`fit_measurement_file` — a measurement file (CSV + TOML sidecar) to fitted μa, μs′
  with SDs (:class:`FitResult`, whose ``to_json()`` is the ``fit`` object of docs/contract.md);
* :func:`update_potencies` — Bayesian linear least-squares update of stock-lot potencies
  from the batch history;
* :mod:`~phantomlab.calibration.correction` — a corrected plan and an add-only top-up.

The names below are loaded on first use (PEP 562 module ``__getattr__``): importing a
sub-module such as ``phantomlab.calibration.baseline_cache`` does not load the fits and
scipy.stats with it, which kept ``phantomlab --help`` waiting about a second.
"""

from __future__ import annotations

from phantomlab.lazy_names import lazy_names

#: Public name -> the sub-module that defines it.
_SOURCES: dict[str, str] = {
    "FitResult": "fit_result",
    "Measurement": "measurements",
    "read_measurement": "measurements",
    "fit_measurement": "fit_file",
    "fit_measurement_file": "fit_file",
    "BatchObservation": "potency",
    "PotencyPrior": "potency",
    "PotencyUpdate": "potency",
    "update_potencies": "potency",
}

__all__ = [
    "FitResult",
    "Measurement",
    "read_measurement",
    "fit_measurement",
    "fit_measurement_file",
    "BatchObservation",
    "PotencyPrior",
    "PotencyUpdate",
    "update_potencies",
]


__getattr__, __dir__ = lazy_names(__name__, _SOURCES, globals())
