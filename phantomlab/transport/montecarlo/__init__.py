"""Monte Carlo photon transport (numba, CPU only): :func:`simulate` and stored baselines.

See :mod:`phantomlab.transport.montecarlo.simulate` and
:mod:`phantomlab.transport.montecarlo.baseline`.
"""

from phantomlab.transport.montecarlo.simulate import (
    MonteCarloResult,
    rho_bin_edges_mm,
    simulate,
    specular_reflectance,
    warm_up,
)

__all__ = ["MonteCarloResult", "rho_bin_edges_mm", "simulate", "specular_reflectance", "warm_up"]
