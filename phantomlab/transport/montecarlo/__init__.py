"""Monte Carlo photon transport (numba, CPU only): :func:`simulate` and stored baselines.

See :mod:`phantomlab.transport.montecarlo.simulate` (the engine's front end),
:mod:`phantomlab.transport.montecarlo.result` (what a run returns) and
:mod:`phantomlab.transport.montecarlo.baseline` (one run, then R(ρ) for other μa and μs) and
:mod:`phantomlab.transport.montecarlo.baseline_file` (a baseline saved and loaded).
"""

from phantomlab.transport.montecarlo.baseline import Baseline
from phantomlab.transport.montecarlo.baseline_file import load_baseline, load_baseline_inputs
from phantomlab.transport.montecarlo.baseline_run import build_baseline
from phantomlab.transport.montecarlo.result import (
    MonteCarloResult,
    rho_bin_edges_mm,
    specular_reflectance,
    time_bin_edges_ps,
)
from phantomlab.transport.montecarlo.simulate import simulate, warm_up

__all__ = [
    "Baseline",
    "MonteCarloResult",
    "build_baseline",
    "load_baseline",
    "load_baseline_inputs",
    "rho_bin_edges_mm",
    "simulate",
    "specular_reflectance",
    "time_bin_edges_ps",
    "warm_up",
]
