"""Model versus observation: a traced model on an observed image's frequency, beam and grid.

::

    cmp = rtrace.compare(result, "observed.fits")
    cmp.residual, cmp.flux_ratio, cmp.notes
    cmp.aperture_flux(regions.CircleSkyRegion(center, 20 * u.arcsec))
    cmp.plot("comparison.png"); cmp.write_fits("residual.fits")
"""

from .core import REPROJECT_ORDERS, ApertureFlux, Comparison, RadialProfile, compare
from .model import FREQUENCY_MATCH_RTOL, ModelCube, model_cube
from .observation import FREQUENCY_KEYWORDS, ComparisonWarning, ObservedImage, read_observation

__all__ = [
    "compare",
    "Comparison",
    "ApertureFlux",
    "RadialProfile",
    "ComparisonWarning",
    "ObservedImage",
    "read_observation",
    "ModelCube",
    "model_cube",
    "REPROJECT_ORDERS",
    "FREQUENCY_KEYWORDS",
    "FREQUENCY_MATCH_RTOL",
]
