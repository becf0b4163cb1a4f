"""Optics of stocks and mixes (layer 2): Mie for spheres, emulsion models, the mixing rule."""

from phantomlab.optics.properties import OpticalProperties

__all__ = ["OpticalProperties"]
