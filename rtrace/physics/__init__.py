"""Free-free physics: coefficients, Gaunt factor, Planck function, ionization.

Public functions take astropy Quantities; the ``*_cgs`` variants and the numba
cores take plain float arrays in cgs units.
"""

from .freefree import RELATIVISTIC_TEMPERATURE, absorption_coefficient, emission_coefficient
from .gaunt import gaunt_factor
from .planck import planck

__all__ = [
    "absorption_coefficient",
    "emission_coefficient",
    "gaunt_factor",
    "planck",
    "RELATIVISTIC_TEMPERATURE",
]
