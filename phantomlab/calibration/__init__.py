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

import importlib

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


def __getattr__(name: str):
    """Load a public name from its sub-module on first use (then it is a plain attribute)."""
    source = _SOURCES.get(name)
    if source is None:
        # AttributeError, so that ``from phantomlab.calibration import some_module`` goes on
        # to import the sub-module.
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(f"{__name__}.{source}"), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
