"""Optics of stocks and mixes (layer 2): Mie for spheres, emulsion models, the mixing rule."""

from phantomlab.optics.emulsion import emulsion_scattering_Michels2008
from phantomlab.optics.intrinsic import IntrinsicOptics, intrinsic_optics
from phantomlab.optics.mie import EnsembleOptics, sphere_ensemble_optics, sphere_ensemble_optics_naive
from phantomlab.optics.mixing import INDEPENDENT_SCATTERING_LIMIT, mix_optics, particle_volume_fraction
from phantomlab.optics.properties import OpticalProperties

__all__ = [
    "OpticalProperties",
    "IntrinsicOptics",
    "intrinsic_optics",
    "mix_optics",
    "particle_volume_fraction",
    "INDEPENDENT_SCATTERING_LIMIT",
    "EnsembleOptics",
    "sphere_ensemble_optics",
    "sphere_ensemble_optics_naive",
    "emulsion_scattering_Michels2008",
]
