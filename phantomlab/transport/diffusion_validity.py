"""Where the diffusion approximation holds: μs′ much larger than μa (layer 2).

Every diffusion model of this layer (steady-state :mod:`phantomlab.transport.diffusion`,
:mod:`phantomlab.transport.spatial_frequency_domain`, :mod:`phantomlab.transport.time_domain`
and :mod:`phantomlab.transport.frequency_domain`) asks the same of the medium: scattering must
dominate absorption.  Below :data:`MIN_MUSP_TO_MUA_RATIO` the models raise a
:class:`PhantomlabWarning` naming the value and the range, and still return their numbers;
the fits use the same line to flag their results.
"""

from __future__ import annotations

import warnings

import numpy as np

from phantomlab.errors import PhantomlabWarning

__all__ = ["MIN_MUSP_TO_MUA_RATIO", "warn_scattering_dominance"]

#: Below this μs′/μa the diffusion approximation is flagged as poor.
#: common practice, no source (diffusion texts ask for μs′ ≫ μa; a factor 10 is the usual line)
MIN_MUSP_TO_MUA_RATIO = 10.0
#: The line widened by one part in a million, for the quick test of :func:`warn_scattering_dominance`.
_HAIR_WIDER = MIN_MUSP_TO_MUA_RATIO * (1.0 + 1e-6)


def warn_scattering_dominance(mua: np.ndarray, musp: np.ndarray, *, stacklevel: int = 4) -> None:
    """Warn when μs′/μa is below :data:`MIN_MUSP_TO_MUA_RATIO` anywhere.

    Parameters
    ----------
    mua, musp : ndarray [1/mm]
        Absorption and reduced scattering coefficients of one broadcast shape; entries with
        μa = 0 or NaN are never flagged.
    stacklevel : int
        As :func:`warnings.warn`, counted from this function: the caller's frame the warning
        names.
    """
    # A cheap test first (a fit calls this on every evaluation): no μs′ within a hair of the
    # line means no warning; anywhere near it, the ratio below decides as always.  Rounding
    # is monotone, so a ratio rounded below the line has μs′ <= its hair-wider product.
    if not (np.asarray(musp) <= _HAIR_WIDER * np.asarray(mua)).any():
        return
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(mua > 0, musp / mua, np.inf)
    finite = ratio[np.isfinite(ratio)]
    if finite.size and finite.min() < MIN_MUSP_TO_MUA_RATIO:
        warnings.warn(
            f"diffusion is poor unless musp >> mua: musp/mua = {finite.min():.3g} here,"
            f" wanted >= {MIN_MUSP_TO_MUA_RATIO:g}",
            PhantomlabWarning,
            stacklevel=stacklevel,
        )
