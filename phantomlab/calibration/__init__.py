"""Calibration layer of phantomlab (layer 3, docs/design.md): inverse fits and the potency loop.

* :func:`fit_measurement_file` — a measurement file (CSV + TOML sidecar) to fitted μa, μs′
  with SDs (:class:`FitResult`, whose ``to_json()`` is the ``fit`` object of docs/contract.md);
* :func:`update_potencies` — Bayesian linear least-squares update of stock-lot potencies
  from the batch history;
* :mod:`~phantomlab.calibration.correction` — a corrected plan and an add-only top-up.
"""

from phantomlab.calibration.fit_file import fit_measurement, fit_measurement_file
from phantomlab.calibration.fit_result import FitResult
from phantomlab.calibration.measurements import Measurement, read_measurement
from phantomlab.calibration.potency import BatchObservation, PotencyPrior, PotencyUpdate, update_potencies

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
